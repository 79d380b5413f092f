"""The statistics of a report: t intervals over seeds, paired tests, Holm's adjustment."""
from __future__ import annotations

import math
import warnings

import numpy as np
from scipy import stats


def t_interval(x, level: float = 0.95) -> tuple[float, float, float, float, int]:
    """(mean, sd, lo, hi, n) with the Student t interval; lo/hi NaN when n < 2."""
    x = np.asarray([v for v in x if v == v], dtype=float)
    n = len(x)
    if n == 0:
        return (math.nan,) * 4 + (0,)
    mean = float(x.mean())
    if n < 2:
        return mean, math.nan, math.nan, math.nan, n
    sd = float(x.std(ddof=1))
    half = float(stats.t.ppf((1 + level) / 2, n - 1)) * sd / math.sqrt(n)
    return mean, sd, mean - half, mean + half, n


def paired_tests(a, b) -> dict[str, float]:
    """Differences a_i - b_i (paired by seed): mean, 95% interval, p-values.
    A pair where either side is NaN (a metric a run could not compute) is left out.
    When every pair differs by the same amount (``zero_spread``: e.g. one video more called
    right at every seed) there is no spread to test against: the t-test is undefined (no p,
    no interval), not p = 0, and the Wilcoxon test sees n signs alike."""
    a, b = np.asarray(a, float), np.asarray(b, float)
    keep = ~(np.isnan(a) | np.isnan(b))
    a, b = a[keep], b[keep]
    d = a - b
    mean, sd, lo, hi, n = t_interval(d)
    p_t = p_w = math.nan
    zero_spread = bool(n >= 2 and sd == 0 and mean != 0)
    if n >= 2 and np.any(d != 0):
        with warnings.catch_warnings():
            warnings.simplefilter("ignore")
            p_t = float(stats.ttest_rel(a, b).pvalue) if sd > 0 else math.nan
            p_w = float(stats.wilcoxon(a, b).pvalue)
    elif n >= 2:
        p_t = p_w = 1.0
    if zero_spread:
        lo = hi = math.nan
    return {"diff": mean, "diff_sd": sd, "diff_lo": lo, "diff_hi": hi, "n_pairs": n, "p_t": p_t,
            "p_wilcoxon": p_w, "zero_spread": zero_spread}


def holm(pvalues) -> list[float]:
    """Holm's step-down adjusted p-values (Holm 1979, Scand. J. Statist. 6): with the m
    non-NaN p sorted, p_(i) -> max_{j <= i} min(1, (m - j + 1) p_(j)); NaN stays NaN."""
    p = np.asarray(pvalues, dtype=float)
    out = np.full(len(p), np.nan)
    ok = np.flatnonzero(~np.isnan(p))
    order = ok[np.argsort(p[ok], kind="stable")]
    m = len(order)
    running = 0.0
    for rank, i in enumerate(order):
        running = max(running, min(1.0, (m - rank) * p[i]))
        out[i] = running
    return out.tolist()
