"""How many seeds a comparison needs, from the spread an experiment already showed."""
from __future__ import annotations

import math

import numpy as np
import pandas as pd
from scipy import stats

MAX_SEEDS = 1000


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
               alpha: float = 0.05) -> pd.DataFrame:
    """Per variant and metric: the paired sd measured against the baseline, the seeds
    run, and the seeds needed to detect a difference of ``diff`` (same units as the metric)."""
    rows = []
    for _, r in table[table.variant != baseline].iterrows():
        n = int(r.get("n_pairs", 0) or 0)
        sd = float(r["diff_sd"]) if n >= 2 else math.nan
        need = seeds_needed(diff, sd, power, alpha) if sd == sd else None
        rows.append({"variant": r["variant"], "metric": r["metric"], "seeds_run": n, "paired_sd": sd,
                     "difference": diff, "seeds_needed": need})
    return pd.DataFrame(rows)


def plan_markdown(plan: pd.DataFrame, metric: str, power: float = 0.8, alpha: float = 0.05) -> str:
    p = plan[plan.metric == metric]
    lines = [f"Seeds needed to detect a difference of {p.difference.iloc[0] if len(p) else '?'} in {metric} "
             f"with power {power} at alpha {alpha} (two-sided paired t, noncentral t; the paired sd is the "
             "one measured here, so the plan is only as good as that estimate):", "",
             "| variant | seeds run | paired sd | seeds needed |", "|---|---|---|---|"]
    for _, r in p.iterrows():
        need = "> 1000" if r.seeds_needed is None or r.seeds_needed != r.seeds_needed else int(r.seeds_needed)
        sd = "n/a" if r.paired_sd != r.paired_sd else f"{r.paired_sd:.4f}"
        lines.append(f"| {r.variant} | {r.seeds_run} | {sd} | {need} |")
    return "\n".join(lines)
