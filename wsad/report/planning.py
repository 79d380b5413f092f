"""How many seeds a comparison needs, from the spread an experiment already showed."""
from __future__ import annotations

import math

import numpy as np
import pandas as pd
from scipy import stats

MAX_SEEDS = 1000
#: The pilot's sd is planned with at its one-sided upper confidence limit at this level (common
#: practice for pilot-based sample sizes; Browne 1995, Stat. Med. 14, from memory).
SD_UPPER_LEVEL = 0.8


def sd_upper_limit(sd: float, n: int, level: float = SD_UPPER_LEVEL) -> float:
    """One-sided upper confidence limit of a standard deviation estimated from ``n`` values:
    sd sqrt((n - 1) / chi2_{1 - level}(n - 1))."""
    if n < 2 or not sd == sd:
        return math.nan
    return float(sd * math.sqrt((n - 1) / stats.chi2.ppf(1 - level, n - 1)))


def paired_power(n: int, effect: float, alpha: float = 0.05) -> float:
    """Power of the two-sided paired t-test with n pairs for a standardised
    difference ``effect`` = d / sd_d: P(|T| > t_{1-alpha/2, n-1}) with T noncentral
    t on n - 1 degrees of freedom and noncentrality effect * sqrt(n)."""
    df, nc = n - 1, effect * math.sqrt(n)
    crit = stats.t.ppf(1 - alpha / 2, df)
    upper, lower = stats.nct.sf(crit, df, nc), stats.nct.cdf(-crit, df, nc)
    # far in a tail SciPy's noncentral t can return NaN for a probability that is ~0
    return float(np.nan_to_num(upper, nan=1.0 if nc > 0 else 0.0) + np.nan_to_num(lower, nan=0.0))


def seeds_needed(diff: float, sd: float, power: float = 0.8, alpha: float = 0.05) -> int | None:
    """The fewest seeds (pairs, >= 2) for which the paired t-test detects a true
    difference ``diff`` with the given power, when the paired differences have
    standard deviation ``sd``; None when more than 1000 would be needed."""
    if not sd > 0:
        return 2
    effect = abs(diff) / sd
    for n in range(2, MAX_SEEDS + 1):
        if paired_power(n, effect, alpha) >= power:
            return n
    return None


def plan_table(table: pd.DataFrame, baseline: str, diff: float, power: float = 0.8,
               alpha: float = 0.05, comparisons: int | None = None) -> pd.DataFrame:
    """Per variant and metric: the paired sd measured against the baseline, its upper
    confidence limit (:func:`sd_upper_limit`: the pilot's sd is itself uncertain), the seeds
    run, and the seeds needed to detect a difference of ``diff`` (same units as the metric) at
    the level Holm's adjustment starts from, alpha / ``comparisons`` (default: the variants
    compared with the baseline), planned with the sd's upper limit."""
    others = table[table.variant != baseline]
    m = comparisons or max(1, others.variant.nunique())
    rows = []
    for _, r in others.iterrows():
        n = int(r.get("n_pairs", 0) or 0)
        sd = float(r["diff_sd"]) if n >= 2 else math.nan
        upper = sd_upper_limit(sd, n)
        need = seeds_needed(diff, upper, power, alpha / m) if upper == upper else None
        rows.append({"variant": r["variant"], "metric": r["metric"], "seeds_run": n, "paired_sd": sd,
                     "paired_sd_upper": upper, "difference": diff, "alpha": alpha / m, "seeds_needed": need})
    return pd.DataFrame(rows)


def plan_markdown(plan: pd.DataFrame, metric: str, power: float = 0.8, alpha: float = 0.05) -> str:
    p = plan[plan.metric == metric]
    level = p.alpha.iloc[0] if len(p) else alpha
    lines = [f"Seeds needed to detect a difference of {p.difference.iloc[0] if len(p) else '?'} in {metric} "
             f"with power {power} at alpha {level:.4g} (the {alpha} of the study divided by its comparisons: the "
             "level Holm's adjustment starts from; two-sided paired t, noncentral t). The paired sd measured "
             f"here is uncertain, so the plan uses its {SD_UPPER_LEVEL:.0%} upper confidence limit:", "",
             "| variant | seeds run | paired sd | its upper limit | seeds needed |", "|---|---|---|---|---|"]
    for _, r in p.iterrows():
        need = "> 1000" if r.seeds_needed is None or r.seeds_needed != r.seeds_needed else int(r.seeds_needed)
        sd = "n/a" if r.paired_sd != r.paired_sd else f"{r.paired_sd:.4f}"
        up = "n/a" if r.paired_sd_upper != r.paired_sd_upper else f"{r.paired_sd_upper:.4f}"
        lines.append(f"| {r.variant} | {r.seeds_run} | {sd} | {up} | {need} |")
    return "\n".join(lines)
