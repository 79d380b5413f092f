"""Runs -> tables, paired tests and plots.

For each variant (a combination of the parameters that vary across runs,
besides the seed) and each metric: mean, sd, n and the 95% t-interval
mean +- t_{0.975, n-1} sd / sqrt(n) over seeds. Each variant is paired with a
baseline by seed; the differences d_i get their mean with a 95% t-interval,
the paired t-test p-value (scipy.stats.ttest_rel) and the Wilcoxon signed-rank
p-value (scipy.stats.wilcoxon). The paired t p-values of one table are
Holm-adjusted over its comparisons (Holm 1979); a difference is *significant*
when the adjusted p < alpha. Note: with n seeds the
exact two-sided Wilcoxon p cannot fall below 2 / 2^n (0.25 at n=3, 0.0625 at
n=5), so it only becomes informative from about 6 seeds on.
"""
from __future__ import annotations

from dataclasses import dataclass
from pathlib import Path

import pandas as pd

from ..errors import WsadError
from ..evaluate.catalogue import lead, reported
from .runs import label_keys, label_of, varying_params
from .stats import holm, paired_tests, t_interval


@dataclass
class Report:
    table: pd.DataFrame        # one row per (variant, metric)
    runs: pd.DataFrame
    by: list[str]
    baseline: str
    alpha: float
    duplicates: int = 0        # runs of a (variant, seed) already present, left out (the latest is kept)
    primary: str = "frame_auc"  # the metric whose comparisons may be called significant


def build_report(runs: pd.DataFrame, by: list[str] | None = None, baseline: str | None = None,
                 metrics: tuple[str, ...] | None = None, alpha: float = 0.05, labelled: bool = False,
                 primary: str | None = None) -> Report:
    """Group runs by ``by`` (default: the varying params), aggregate over seeds,
    and pair every variant with ``baseline`` (a variant label, or k=v pairs;
    default: a variant whose values look like the unchanged recipe, else the first).
    ``labelled``: ``runs`` already holds a ``variant`` column (a study's own labels, in order).
    ``primary``: the metric the comparison is about (default: the catalogue's lead metric). Its
    paired t p-values are Holm-adjusted over the comparisons and a difference is *significant*
    when the adjusted p < alpha; every other metric is *secondary*: its p-values are shown, its
    differences are never called significant (many metrics, each tested, would find one by luck)."""
    by = [] if labelled else varying_params(runs) if by is None else list(by)
    metrics = reported() if metrics is None else tuple(metrics)
    primary = primary or lead()
    metrics = metrics + transfer_columns(runs, metrics)
    for key in by:
        if f"params.{key}" not in runs.columns:
            raise WsadError(f"--by {key}: no run has this param; varying ones: "
                            f"{', '.join(varying_params(runs)) or 'none'}")
    runs = runs.copy()
    for key in by:
        if f"params.{key}" not in runs.columns:
            runs[f"params.{key}"] = None
    if not labelled:
        shown = label_keys(runs, by)
        runs["variant"] = [label_of({k: r.get(f"params.{k}") for k in shown}) for _, r in runs.iterrows()]
    runs["seed"] = runs.get("params.seed", pd.Series(["0"] * len(runs)))
    if "start_time" in runs.columns and not labelled:
        runs = runs.sort_values("start_time", kind="stable")
    dup = runs.duplicated(["variant", "seed"], keep="last")  # one seed run twice: keep the latest
    runs = runs[~dup].reset_index(drop=True)
    variants = list(dict.fromkeys(runs["variant"] if labelled else sorted(runs["variant"], key=_baseline_rank)))
    base = _pick_baseline(variants, baseline)
    variants = [base] + [v for v in variants if v != base]
    rows = []
    for metric in metrics:
        col = f"metrics.{metric}"
        if col not in runs.columns:
            continue
        base_runs = runs[runs.variant == base].set_index("seed")[col]
        for v in variants:
            sub = runs[runs.variant == v]
            mean, sd, lo, hi, n = t_interval(sub[col])
            row = {"variant": v, "metric": metric, "n": n, "mean": mean, "sd": sd, "lo": lo, "hi": hi}
            if v != base:
                mine = sub.set_index("seed")[col]
                common = sorted(set(mine.index) & set(base_runs.index))
                row.update(paired_tests(mine.loc[common].to_numpy(), base_runs.loc[common].to_numpy()))
            rows.append(row)
        tested = [r for r in rows if r["metric"] == metric and r["variant"] != base]
        for r, p in zip(tested, holm([r["p_t"] for r in tested])):
            r["p_holm"] = p
            r["role"] = "primary" if metric == primary else "secondary"
            r["significant"] = bool(metric == primary and p == p and p < alpha)
    if not rows:
        raise WsadError(f"the runs log none of the metrics {list(metrics)}")
    return Report(pd.DataFrame(rows), runs, by, base, alpha, int(dup.sum()), primary)


def transfer_columns(runs: pd.DataFrame, metrics: tuple[str, ...]) -> tuple[str, ...]:
    """``transfer/<store>/<metric>`` columns of ``runs`` for the ``metrics`` asked for, by store."""
    found = [c.removeprefix("metrics.") for c in runs.columns if c.startswith("metrics.transfer/")]
    return tuple(sorted((m for m in found if m.split("/", 2)[-1] in metrics),
                        key=lambda m: (m.split("/")[1], metrics.index(m.split("/", 2)[-1]))))


def _baseline_rank(label: str) -> tuple:
    # variants that look unchanged come first: toggle=none, order=shuffled recipe default, ...
    return (0 if "=none" in label else 1, label)


def _pick_baseline(variants: list[str], baseline: str | None) -> str:
    if baseline is None:
        return variants[0]
    if baseline in variants:
        return baseline
    wanted = [p.strip() for p in baseline.split(",")]
    hits = [v for v in variants if all(w in v.split(", ") for w in wanted)]
    if len(hits) != 1:
        raise WsadError(f"--baseline {baseline!r} matches {len(hits)} variants; variants: "
                        + "; ".join(variants))
    return hits[0]


# --- writing ------------------------------------------------------------------------------
def _fmt(x: float, digits: int = 3) -> str:
    return "n/a" if x is None or x != x else f"{x:.{digits}f}"


def _p(x: float) -> str:
    return "n/a" if x != x else (f"{x:.3f}" if x >= 0.001 else "<0.001")


def frame_markdown(df: pd.DataFrame, digits: int = 3, index: bool = False) -> str:
    """Any table as a markdown pipe table, numbers to ``digits`` decimals."""
    df = df.reset_index() if index else df
    cell = lambda v: _fmt(v, digits) if isinstance(v, float) else str(v)  # noqa: E731
    lines = ["| " + " | ".join(map(str, df.columns)) + " |", "|" + "---|" * len(df.columns)]
    lines += ["| " + " | ".join(cell(v) for v in row) + " |" for row in df.itertuples(index=False)]
    return "\n".join(lines)


def markdown_table(rep: Report, metric: str) -> str:
    t = rep.table[rep.table.metric == metric]
    two = "diff_two_level_lo" in t.columns
    lines = [f"| variant | n | {metric} mean ± sd | 95% CI | Δ vs baseline [95% CI] | p (paired t) "
             "| p (Holm) | p (Wilcoxon) |" + (" Δ [95% CI, cameras and seeds] |" if two else ""),
             "|---|---|---|---|---|---|---|---|" + ("---|" if two else "")]
    for _, r in t.iterrows():
        cell = f"{_fmt(r['mean'])} ± {_fmt(r['sd'])}"
        ci = f"[{_fmt(r['lo'])}, {_fmt(r['hi'])}]"
        if r["variant"] == rep.baseline:
            diff, pt, ph, pw = "baseline", "", "", ""
        else:
            diff = _diff(r)
            pt, ph, pw = _p(r["p_t"]), _p(r["p_holm"]), _p(r["p_wilcoxon"])
            if r.get("significant"):
                diff, ph = f"**{diff}**", f"**{ph}**"
        row = f"| {r['variant']} | {r['n']} | {cell} | {ci} | {diff} | {pt} | {ph} | {pw} |"
        if two:
            row += (" baseline |" if r["variant"] == rep.baseline or pd.isna(r.get("diff_two_level_lo"))
                    else f" [{_fmt(r['diff_two_level_lo'])}, {_fmt(r['diff_two_level_hi'])}] |")
        lines.append(row)
    if two:
        lines.append("\n*Δ [95% CI, cameras and seeds]: the paired difference's interval when both the test "
                     "cameras and the seeds are resampled (supports 'on cameras like these'; the one before it "
                     "resamples seeds only: 'on this test set').*")
    if metric != rep.primary:
        lines.append(f"\n*{metric} is a secondary metric: its p-values are not adjusted across metrics and no "
                     f"difference is marked; the study's primary metric is {rep.primary}.*")
    return "\n".join(lines)


def _diff(r) -> str:
    """The paired difference with its interval; a difference without spread says so."""
    if r.get("zero_spread") is True:
        return f"{r['diff']:+.3f} at every seed (no spread: no test)"
    return f"{r['diff']:+.3f} [{_fmt(r['diff_lo'])}, {_fmt(r['diff_hi'])}]"


def latex_table(rep: Report, metric: str) -> str:
    t = rep.table[rep.table.metric == metric]
    esc = lambda s: str(s).replace("_", r"\_").replace("%", r"\%").replace("&", r"\&")  # noqa: E731
    out = [r"\begin{tabular}{lrlll}", r"\toprule",
           rf"Variant & $n$ & {esc(metric)} (mean $\pm$ sd) & $\Delta$ vs baseline [95\% CI] & $p$ (Holm) \\",
           r"\midrule"]
    for _, r in t.iterrows():
        if r["variant"] == rep.baseline:
            diff, p = "baseline", ""
        else:
            diff = _diff(r).replace(f"{r['diff']:+.3f}", f"${r['diff']:+.3f}$", 1)
            p = _p(r["p_holm"])
            if r.get("significant"):
                diff, p = rf"\textbf{{{diff}}}", rf"\textbf{{{p}}}"
        out.append(rf"{esc(r['variant'])} & {r['n']} & ${_fmt(r['mean'])} \pm {_fmt(r['sd'])}$ & {diff} & {p} \\")
    out += [r"\bottomrule", r"\end{tabular}"]
    return "\n".join(out)


def write_report(rep: Report, out: Path, tracking_uri: str | None = None,
                 headline: str = "frame_auc", plots: bool = True, plan: float | None = None) -> dict[str, Path]:
    """report.md, report.csv, report.tex, with ``plan`` a seed plan for a difference of
    that size in the headline metric (plan.csv), and (with a tracking URI) the plots."""
    out = Path(out)
    out.mkdir(parents=True, exist_ok=True)
    paths = {}
    metrics = list(dict.fromkeys(rep.table.metric))
    n_seeds = rep.runs.groupby("variant").size()
    md = ["# Ablation report", "",
          f"{len(rep.runs)} finished runs, {rep.runs.variant.nunique()} variants "
          f"(grouped by {', '.join(rep.by) or 'nothing'}), seeds per variant "
          f"{n_seeds.min()}–{n_seeds.max()}. Baseline: **{rep.baseline}**.", "",
          f"Intervals are 95% Student t over seeds; Δ is paired by seed. p (Holm): the paired t-test "
          f"p adjusted for the {max(rep.runs.variant.nunique() - 1, 0)} comparisons of each table "
          f"(Holm 1979). The primary metric is **{rep.primary}**: bold marks its differences with adjusted "
          f"p < {rep.alpha}; every other metric is secondary (shown, never marked). Intervals over seeds say "
          "how much a result moves with the seed, not with the test set. With n seeds the exact Wilcoxon "
          "signed-rank p cannot fall below 2/2^n (all n signs alike).", ""]
    if rep.duplicates:
        md[3:3] = [f"{rep.duplicates} run(s) repeated a seed of their variant and were left out "
                   "(the latest run of each seed is kept).", ""]
    for m in metrics:
        md += [f"## {m}", "", markdown_table(rep, m), ""]
    if plan is not None:
        from .planning import plan_markdown, plan_table

        table = plan_table(rep.table, rep.baseline, plan)
        paths["plan"] = out / "plan.csv"
        table.to_csv(paths["plan"], index=False)
        md += ["## Seed plan", "", plan_markdown(table, headline), ""]
    paths["md"] = out / "report.md"
    paths["md"].write_text("\n".join(md))
    paths["csv"] = out / "report.csv"
    rep.table.to_csv(paths["csv"], index=False)
    paths["tex"] = out / "report.tex"
    paths["tex"].write_text("\n\n".join(f"% {m}\n" + latex_table(rep, m) for m in metrics) + "\n")
    if plots:
        from .plots import all_plots

        paths.update(all_plots(rep, out, tracking_uri, headline))
    return paths
