"""Multi-run studies from Python (notebooks): a sweep over composed configs run in
parallel processes, and the window-order study over the generator's correlation knobs."""
from __future__ import annotations

import os
from pathlib import Path

import numpy as np
import pandas as pd
from joblib import Parallel, delayed
from tqdm.auto import tqdm

from .report import paired_tests, t_interval


def _one_run(overrides: list[str]) -> dict:
    os.environ.setdefault("OMP_NUM_THREADS", "1")
    from .config import compose_config
    from .train import train

    res = train(compose_config(overrides))
    return {**res.metrics, "out_dir": str(res.out_dir), "run_id": res.run_id,
            "returned": res.objective, "overrides": " ".join(overrides)}


def run_many(override_sets: list[list[str]], jobs: int = 2, desc: str = "runs") -> pd.DataFrame:
    """Train one run per override list, ``jobs`` processes at a time; one row per run.

    The tracking store (if any) is created once here, before the workers start."""
    from . import tracking
    from .config import compose_config

    first = compose_config(override_sets[0])
    if first.tracking.enabled:
        tracking.prepare(tracking.resolve_uri(str(first.tracking.uri)), str(first.tracking.experiment))
    extra = ["trainer.progress=false"] + (["trainer.threads=1"] if jobs > 1 else [])
    todo = [list(o) + extra for o in override_sets]
    if jobs <= 1:
        rows = [_one_run(o) for o in tqdm(todo, desc=desc)]
    else:
        rows = Parallel(n_jobs=jobs, return_as="generator")(delayed(_one_run)(o) for o in todo)
        rows = list(tqdm(rows, total=len(todo), desc=desc))
    return pd.DataFrame(rows)


def order_study(work: str | Path, knob: str, values: list, seeds: list[int],
                scenario_overrides: list[str] | None = None,
                train_overrides: list[str] | None = None, jobs: int = 2) -> pd.DataFrame:
    """For each value of a generator knob (e.g. ``rho``), generate a store and
    train the windows recipe with ``bags.order`` sequential and shuffled over
    ``seeds``. Returns one row per (value, seed, order) with the test metrics."""
    from .synthetic import generate_store, load_scenario

    work = Path(work)
    sets, keys = [], []
    for v in values:
        root = work / f"{knob}_{v}"
        if not (root / "store.json").exists():
            generate_store(load_scenario("warehouse", list(scenario_overrides or []) + [f"{knob}={v}"]),
                           root, progress=False)
        for seed in seeds:
            for order in ("sequential", "shuffled"):
                sets.append([f"data.root={root}", "recipe=windows", f"bags.order={order}",
                             f"seed={seed}", "tracking.enabled=false", "trainer.bootstrap=0",
                             f"trainer.out_dir={work}/runs/{knob}_{v}/{order}/{seed}",
                             *(train_overrides or [])])
                keys.append({"knob": knob, "value": v, "seed": seed, "order": order})
    res = run_many(sets, jobs=jobs, desc=f"order study over {knob}")
    return pd.concat([pd.DataFrame(keys), res[["frame_auc", "frame_ap", "video_auc"]]], axis=1)


def order_effect(results: pd.DataFrame, metric: str = "frame_auc", alpha: float = 0.05) -> pd.DataFrame:
    """Per knob value: shuffled minus sequential, paired by seed (mean, 95% t-interval,
    paired t and Wilcoxon p), and whether order matters at ``alpha`` (paired t)."""
    rows = []
    for (knob, value), sub in results.groupby(["knob", "value"], sort=True):
        wide = sub.pivot(index="seed", columns="order", values=metric)
        t = paired_tests(wide["shuffled"].to_numpy(), wide["sequential"].to_numpy())
        seq = t_interval(wide["sequential"])
        shf = t_interval(wide["shuffled"])
        rows.append({"knob": knob, "value": value, "n": t["n_pairs"],
                     "sequential": seq[0], "shuffled": shf[0], "diff": t["diff"],
                     "diff_lo": t["diff_lo"], "diff_hi": t["diff_hi"], "p_t": t["p_t"],
                     "p_wilcoxon": t["p_wilcoxon"], "order_matters": bool(t["p_t"] < alpha)})
    return pd.DataFrame(rows)


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
        colors = ["tab:red" if m else "tab:gray" for m in e.order_matters]
        ax.errorbar(x, e["diff"], yerr=[e["diff"] - e["diff_lo"], e["diff_hi"] - e["diff"]], fmt="none",
                    ecolor="0.4", capsize=4)
        ax.scatter(x, e["diff"], c=colors, zorder=3, s=40)
        ax.axhline(0, color="k", lw=0.8)
        ax.set_xticks(x, [str(v) for v in e["value"]])
        ax.set(xlabel=knob, ylabel="frame AUC: shuffled - sequential",
               title=f"window order effect vs {knob}\n(red: paired t p < 0.05)")
    fig.tight_layout()
    if path is not None:
        from .evaluate.plots import save_figure

        save_figure(fig, Path(path), 120, close=False)
    return fig


def order_conclusion(effect: pd.DataFrame) -> str:
    """The closing paragraph, written from the numbers."""
    parts = []
    sig = effect[effect.order_matters]
    flat = effect[~effect.order_matters]
    n = int(effect["n"].min())
    for _, r in sig.iterrows():
        better = "shuffled" if r["diff"] > 0 else "sequential"
        parts.append(f"at {r.knob}={r.value} window order matters: {better} windows score higher "
                     f"(shuffled - sequential = {r['diff']:+.3f} frame AUC, 95% CI "
                     f"[{r.diff_lo:+.3f}, {r.diff_hi:+.3f}], paired t p={r.p_t:.3g}, {n} seeds)")
    for _, r in flat.iterrows():
        parts.append(f"at {r.knob}={r.value} it does not measurably matter (difference "
                     f"{r['diff']:+.3f}, 95% CI [{r.diff_lo:+.3f}, {r.diff_hi:+.3f}], p={r.p_t:.3g})")
    text = "; ".join(parts) + "."
    if sig.empty:
        text = ("In no setting tried did window order change frame AUC significantly: " + text)
    elif flat.empty:
        text = ("Window order mattered in every setting tried: " + text)
    else:
        text = text[0].upper() + text[1:]
    return text + (f" Wilcoxon p-values are reported too; with {n} seeds they cannot fall below "
                   f"{2 / 2 ** n:.3f}.")


def effect_markdown(effect: pd.DataFrame) -> str:
    lines = ["| knob | value | n | sequential | shuffled | shuffled - sequential [95% CI] "
             "| p (paired t) | p (Wilcoxon) |",
             "|---|---|---|---|---|---|---|---|"]
    for _, r in effect.iterrows():
        d = f"{r['diff']:+.3f} [{r.diff_lo:+.3f}, {r.diff_hi:+.3f}]"
        if r.order_matters:
            d = f"**{d}**"
        lines.append(f"| {r.knob} | {r.value} | {r.n} | {r.sequential:.3f} | {r.shuffled:.3f} | {d} | "
                     f"{r.p_t:.3g} | {r.p_wilcoxon:.3g} |")
    return "\n".join(lines)
