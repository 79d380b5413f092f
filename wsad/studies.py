"""The window-order study over the generator's correlation knobs (notebook 04): a
:class:`wsad.Study` over one store per knob value, read back here, and the effect of order
tested only where both orders learn."""
from __future__ import annotations

from pathlib import Path

import numpy as np
import pandas as pd

from .report.stats import holm, paired_tests, t_interval


def order_results(study) -> pd.DataFrame:
    """A window-order study's finished runs (a :class:`wsad.Study` over stores named
    ``knob=value``, variants ``bags.order`` sequential and shuffled) as one row per
    (knob, value, seed, order) with the test metrics."""
    res = study.results()
    if res.empty:
        return pd.DataFrame(columns=["knob", "value", "seed", "order", "frame_auc"])
    knob_value = res.store.str.split("=", n=1, expand=True)
    return pd.DataFrame({"knob": knob_value[0], "value": pd.to_numeric(knob_value[1]), "seed": res.seed.astype(int),
                         "order": res["params.bags.order"], "frame_auc": res["metrics.frame_auc"],
                         "frame_ap": res.get("metrics.frame_ap"), "video_auc": res.get("metrics.video_auc")})


#: A setting speaks about order only where both arms learn: the lower end of each arm's 95%
#: t-interval over seeds must clear chance (0.5) by this margin.
LEARNS_ABOVE = 0.55


def order_effect(results: pd.DataFrame, metric: str = "frame_auc", alpha: float = 0.05,
                 learns_above: float = LEARNS_ABOVE) -> pd.DataFrame:
    """Per knob value: shuffled minus sequential, paired by seed (mean, 95% t-interval,
    paired t and Wilcoxon p). A setting is tested only where both orders learn (both
    lower interval bounds above ``learns_above``); across the tested settings the paired
    t p-values are Holm-adjusted (Holm 1979), and order matters where the adjusted p < alpha."""
    rows = []
    for (knob, value), sub in results.groupby(["knob", "value"], sort=True):
        wide = sub.pivot(index="seed", columns="order", values=metric)
        t = paired_tests(wide["shuffled"].to_numpy(), wide["sequential"].to_numpy())
        seq, shf = t_interval(wide["sequential"]), t_interval(wide["shuffled"])
        learns = bool(seq[2] > learns_above and shf[2] > learns_above)
        rows.append({"knob": knob, "value": value, "n": t["n_pairs"],
                     "sequential": seq[0], "sequential_lo": seq[2], "shuffled": shf[0], "shuffled_lo": shf[2],
                     "learns": learns, "diff": t["diff"], "diff_lo": t["diff_lo"], "diff_hi": t["diff_hi"],
                     "p_t": t["p_t"], "p_wilcoxon": t["p_wilcoxon"]})
    out = pd.DataFrame(rows)
    out["p_holm"] = np.nan
    tested = out.index[out.learns]
    out.loc[tested, "p_holm"] = holm(out.loc[tested, "p_t"].to_numpy())
    out["order_matters"] = out.learns & (out.p_holm < alpha)
    return out


def order_effect_plot(effect: pd.DataFrame, path: Path | None = None):
    """Shuffled - sequential frame AUC with 95% intervals against each knob."""
    import matplotlib.pyplot as plt
    import seaborn as sns

    sns.set_theme(style="whitegrid")
    knobs = list(dict.fromkeys(effect.knob))
    fig, axes = plt.subplots(1, len(knobs), figsize=(5 * len(knobs), 3.6), squeeze=False)
    for ax, knob in zip(axes[0], knobs):
        e = effect[effect.knob == knob].sort_values("value")
        x = np.arange(len(e))
        colors = ["tab:red" if m else ("tab:gray" if ok else "none") for m, ok in zip(e.order_matters, e.learns)]
        ax.errorbar(x, e["diff"], yerr=[e["diff"] - e["diff_lo"], e["diff_hi"] - e["diff"]], fmt="none",
                    ecolor="0.4", capsize=4)
        ax.scatter(x, e["diff"], c=colors, edgecolors="tab:gray", zorder=3, s=40)
        ax.axhline(0, color="k", lw=0.8)
        ax.set_xticks(x, [str(v) for v in e["value"]])
        ax.set(xlabel=knob, ylabel="frame AUC: shuffled - sequential",
               title=f"window order effect vs {knob}\n(red: Holm p < 0.05; hollow: the model does not learn)")
    fig.tight_layout()
    if path is not None:
        from .evaluate.plots import save_figure

        save_figure(fig, Path(path), 120, close=False)
    plt.close(fig)   # shown once, by the returned Figure's own display
    return fig


def order_conclusion(effect: pd.DataFrame) -> str:
    """The closing paragraph, written from the numbers."""
    parts = []
    n = int(effect["n"].min())
    for _, r in effect.iterrows():
        where = f"at {r.knob}={r.value}"
        if not r.learns:
            parts.append(f"{where} the model does not learn here (lower 95% bounds sequential "
                         f"{r.sequential_lo:.3f}, shuffled {r.shuffled_lo:.3f}; an effect between two models "
                         f"near chance says nothing about order)")
        elif r.order_matters:
            better = "shuffled" if r["diff"] > 0 else "sequential"
            parts.append(f"{where} window order matters: {better} windows score higher (shuffled - sequential "
                         f"= {r['diff']:+.3f} frame AUC, 95% CI [{r.diff_lo:+.3f}, {r.diff_hi:+.3f}], "
                         f"Holm-adjusted p={r.p_holm:.3g}, {n} seeds)")
        elif r.diff_lo > 0 or r.diff_hi < 0:
            parts.append(f"{where} the seed interval of the difference excludes 0 ({r['diff']:+.3f}, 95% CI "
                         f"[{r.diff_lo:+.3f}, {r.diff_hi:+.3f}]) but not after adjusting for the settings tested "
                         f"(Holm-adjusted p={r.p_holm:.3g}): an effect of order is not shown")
        else:
            parts.append(f"{where} an effect of order is not shown (difference {r['diff']:+.3f}, 95% CI "
                         f"[{r.diff_lo:+.3f}, {r.diff_hi:+.3f}], Holm-adjusted p={r.p_holm:.3g}); the interval "
                         "says how large an effect these seeds could have missed")
    text = "; ".join(parts) + "."
    text = text[0].upper() + text[1:]
    learned = effect[effect.learns]
    if learned.empty:
        text = "In no setting tried did both orders learn, so this study cannot speak about order. " + text
    elif not learned.order_matters.any():
        text = "Where the model learns, window order did not change frame AUC significantly. " + text
    return text + (f" p-values are Holm-adjusted over the {len(learned)} settings where both orders learn; "
                   f"with {n} seeds the exact Wilcoxon p cannot fall below {2 / 2 ** n:.3f}.")


def effect_markdown(effect: pd.DataFrame) -> str:
    lines = ["| knob | value | n | sequential | shuffled | both learn | shuffled - sequential [95% CI] "
             "| p (paired t) | p (Holm) | p (Wilcoxon) |",
             "|---|---|---|---|---|---|---|---|---|---|"]
    for _, r in effect.iterrows():
        d = f"{r['diff']:+.3f} [{r.diff_lo:+.3f}, {r.diff_hi:+.3f}]"
        if r.order_matters:
            d = f"**{d}**"
        holm_p = "not tested" if r.p_holm != r.p_holm else f"{r.p_holm:.3g}"
        lines.append(f"| {r.knob} | {r.value} | {r.n} | {r.sequential:.3f} | {r.shuffled:.3f} | "
                     f"{'yes' if r.learns else 'no'} | {d} | {r.p_t:.3g} | {holm_p} | {r.p_wilcoxon:.3g} |")
    return "\n".join(lines)
