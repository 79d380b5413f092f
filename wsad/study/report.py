"""What a study shows: its plan, and its seed-aggregated comparison as an object with a rich
notebook display, text exports and figures."""
from __future__ import annotations

from html import escape
from pathlib import Path

import numpy as np
import pandas as pd

from ..errors import WsadError
from ..report.tables import Report, _fmt, build_report, latex_table, markdown_table
from ..report.two_level import add_two_level
from .html import _html_table


class StudyReport:
    """The comparison of a study's variants over seeds, per store: for each metric, mean, sd and
    a 95% t-interval per variant, the paired difference with the baseline (by seed) with its
    interval, paired t and Wilcoxon p, and the Holm-adjusted p (bold where below alpha).
    ``failures``: the runs that failed, with their errors."""

    def __init__(self, study):
        self.study = study
        self.primary = study.primary
        results = study.results()
        if results.empty:
            raise WsadError(f"study {study.name} has no finished run yet; run it first (study.run())")
        self.reports: dict[str, Report] = {}
        for store, runs in results.groupby("store", sort=False):
            self.reports[store] = build_report(runs.reset_index(drop=True), baseline=study.baseline,
                                               alpha=study.alpha, labelled=True, primary=study.primary)
        status = study.runs()
        self.failures = status[status.status == "failed"][["store", "variant", "seed", "error"]].reset_index(drop=True)
        if self.primary == "frame_auc":
            for rep in self.reports.values():
                add_two_level(rep)
        self.baselines = self._baselines()

    def _baselines(self) -> pd.DataFrame:
        """Per store: the bag-embedding baseline's video AUC (no MIL training) beside each
        variant's mean video AUC (:mod:`wsad.evaluate.baseline`)."""
        from ..evaluate.baseline import baseline_video_auc
        from ..store import FeatureStore

        rows = []
        for store, rep in self.reports.items():
            ref = baseline_video_auc(FeatureStore(self.study.stores[store]))
            t = rep.table[rep.table.metric == "video_auc"].set_index("variant")["mean"]
            rows.append({"store": store, "baseline video_auc": ref, **{f"{v} video_auc": m for v, m in t.items()}})
        return pd.DataFrame(rows)

    @property
    def table(self) -> pd.DataFrame:
        """Every (store, variant, metric) row."""
        return pd.concat([r.table.assign(store=s) for s, r in self.reports.items()], ignore_index=True)

    def to_markdown(self, metric: str | None = None) -> str:
        metric = metric or self.primary
        parts = []
        for store, rep in self.reports.items():
            head = f"**{store}**, {metric}\n\n" if len(self.reports) > 1 else ""
            parts.append(head + markdown_table(rep, metric))
        parts.append(self._baseline_text())
        if len(self.failures):
            parts.append("Failed runs:\n\n" + "\n".join(f"- {r.variant}, seed {r.seed}: {r.error}"
                                                          for r in self.failures.itertuples()))
        return "\n\n".join(parts)

    def to_latex(self, metric: str | None = None) -> str:
        return "\n\n".join(latex_table(rep, metric or self.primary) for rep in self.reports.values())

    def to_csv(self, path: str | Path | None = None) -> str | None:
        return self.table.to_csv(path, index=False) if path is not None else self.table.to_csv(index=False)

    def __repr__(self) -> str:
        return self.to_markdown()

    def _repr_html_(self) -> str:
        html = []
        for store, rep in self.reports.items():
            t = rep.table[rep.table.metric == self.primary]
            if len(self.reports) > 1:
                html.append(f"<h4>{escape(store)}</h4>")
            html.append(_html_table(t, rep, self.primary))
        n = len(next(iter(self.reports.values())).runs.groupby("variant"))
        html.append(f"<p style='font-size:smaller'>{escape(self.primary)} is the study's primary metric; its "
                    f"{max(n - 1, 0)} comparison(s) with the baseline are Holm-adjusted (bold: adjusted p &lt; "
                    f"{self.study.alpha}). Intervals are 95% Student t over seeds; they say how much the result "
                    "moves with the seed, not with the test set. Other metrics: <code>.to_markdown(metric)</code>."
                    "</p>")
        html.append(f"<p>{escape(self._baseline_text())}</p>")
        if len(self.failures):
            html.append("<p><b>Failed runs</b></p>" + self.failures.to_html(index=False))
        return "".join(html)

    def _baseline_text(self) -> str:
        parts = []
        for r in self.baselines.to_dict("records"):
            ref = r.pop("baseline video_auc")
            store = r.pop("store")
            mil = ", ".join(f"{k.removesuffix(' video_auc')} {v:.3f}" for k, v in r.items() if v == v)
            where = f" on {store}" if len(self.baselines) > 1 else ""
            parts.append(f"Reference{where}: the bag-embedding baseline (mean, max and min of each video's segments, "
                         f"a logistic regression, no MIL training) reaches video_auc "
                         f"{'n/a' if ref is None else f'{ref:.3f}'}; the variants' mean video_auc: {mil}.")
        return " ".join(parts)

    def conclusion(self, metric: str | None = None) -> str:
        """What the table supports, in words: per variant, the paired difference with the baseline,
        its interval and Holm-adjusted p; a difference is claimed only where that p is below alpha,
        and no comparison is read where the baseline's interval includes chance (AUC metrics)."""
        metric = metric or self.primary
        out = []
        for store, rep in self.reports.items():
            t = rep.table[rep.table.metric == metric].set_index("variant")
            where = f" on {store}" if len(self.reports) > 1 else ""
            base = t.loc[rep.baseline]
            if "auc" in metric and not base["lo"] > 0.5:
                out.append(f"{rep.baseline}{where}: its {metric} interval [{_fmt(base['lo'])}, {_fmt(base['hi'])}] "
                           "includes chance (0.5), so no comparison with it is read here.")
                continue
            for variant, r in t.drop(index=rep.baseline).iterrows():
                ci = f"{r['diff']:+.3f} {metric}, 95% CI [{_fmt(r['diff_lo'])}, {_fmt(r['diff_hi'])}]"
                p = f"Holm-adjusted p = {_fmt(r.get('p_holm'))}, {int(r['n_pairs'])} seeds"
                if r.get("significant"):
                    word = "higher" if r["diff"] > 0 else "lower"
                    lo2, hi2 = r.get("diff_two_level_lo", float("nan")), r.get("diff_two_level_hi", float("nan"))
                    wider = ""
                    if lo2 == lo2:
                        holds = lo2 > 0 or hi2 < 0
                        wider = (f" With the test cameras resampled too, the difference's interval is [{_fmt(lo2)}, "
                                 f"{_fmt(hi2)}]: " + ("it also supports 'on cameras like these'." if holds else
                                                     "it does not support 'on cameras like these', only 'on this "
                                                     "test set'."))
                    out.append(f"{variant}{where}: {word} than {rep.baseline} on this test set ({ci}; {p}).{wider}")
                elif r["diff_lo"] > 0 or r["diff_hi"] < 0:
                    out.append(f"{variant}{where}: the seed interval of the difference excludes 0 ({ci}), but not "
                               f"after adjusting for the study's comparisons ({p}); not shown.")
                else:
                    out.append(f"{variant}{where}: no difference from {rep.baseline} shown ({ci}; {p}).")
        out.append("The seed intervals say whether a variant is better on this test set; the intervals over "
                   "cameras and seeds together say whether it is better on cameras like these. "
                   f"Significance: Holm-adjusted paired t at alpha {self.study.alpha} on {metric}, the primary metric.")
        return "\n".join(out)

    # --- across stores ------------------------------------------------------------------------------
    def score_matrix(self, metric: str | None = None) -> dict[str, np.ndarray]:
        """``{variant: [seeds, stores]}`` of ``metric`` (seeds every store has, in order)."""
        metric = metric or self.primary
        res = self.study.results()
        col = f"metrics.{metric}"
        if col not in res.columns:
            raise WsadError(f"no finished run logs {metric}")
        wide = res.pivot_table(index=["variant", "seed"], columns="store", values=col)
        stores = list(self.study.stores)
        out = {}
        for v in dict.fromkeys(res.variant):
            m = wide.loc[v].reindex(columns=stores).dropna()
            out[v] = m.to_numpy()
        return out

    def across_stores(self, metric: str | None = None, reps: int = 2000) -> pd.DataFrame:
        """Each variant over every store: the interquartile mean of its runs with a stratified
        bootstrap interval, and its probability of improvement over the baseline with its interval
        (Agarwal et al., NeurIPS 2021; :mod:`wsad.report.aggregate`)."""
        from ..report.aggregate import improvement_interval, interval, iqm

        if len(self.study.stores) < 2:
            raise WsadError("aggregates across stores need a study over two or more stores")
        scores = self.score_matrix(metric)
        base = next(iter(self.reports.values())).baseline
        rows = []
        for v, (value, lo, hi) in interval(scores, iqm, reps).items():
            row = {"variant": v, "iqm": value, "iqm_lo": lo, "iqm_hi": hi}
            if v != base:
                p, plo, phi = improvement_interval(scores[v], scores[base], reps)
                row.update(p_improvement=p, p_improvement_lo=plo, p_improvement_hi=phi)
            rows.append(row)
        return pd.DataFrame(rows)

    def plot_profiles(self, metric: str | None = None):
        """Performance profiles: the share of runs (seeds x stores) scoring above each threshold."""
        import matplotlib.pyplot as plt
        import seaborn as sns

        from ..report.aggregate import performance_profile

        scores = self.score_matrix(metric)
        allv = np.concatenate([s.ravel() for s in scores.values()])
        taus = np.linspace(allv.min(), allv.max(), 101)
        sns.set_theme(style="whitegrid")
        fig, ax = plt.subplots(figsize=(5.5, 3.8))
        for v, s in scores.items():
            ax.plot(taus, performance_profile(s, taus), lw=1.6, label=v)
        ax.set(xlabel=f"{metric or self.primary} threshold tau", ylabel="share of runs above tau",
               title=f"performance profiles over {len(self.study.stores)} stores")
        ax.legend(fontsize=7)
        fig.tight_layout()
        plt.close(fig)
        return fig

    # --- figures ------------------------------------------------------------------------------------
    def plot(self, metric: str | None = None, store: str | None = None):
        """``metric`` per variant: each seed a dot, the mean with its 95% t-interval."""
        from ..report.plots import metric_figure

        return metric_figure(self._report(store), metric or self.primary)

    def plot_roc(self, store: str | None = None):
        """The frame-level ROC of one seed per variant."""
        from ..evaluate.plots import roc_figure

        curves = {}
        for v, run in self._one_per_variant(store).items():
            known = run.scores[run.scores.label >= 0]
            curves[v] = (known.label.to_numpy(), known.score.to_numpy())
        return roc_figure(curves, "frame-level ROC (one seed per variant)")

    def plot_timelines(self, store: str | None = None, videos: int = 4):
        from ..report.plots import timelines_figure

        return timelines_figure({v: run.scores for v, run in self._one_per_variant(store).items()}, videos)

    def plot_learning_curves(self, metric: str = "weak_val_video_auc", store: str | None = None):
        """``metric`` and the training loss per epoch, mean over seeds with a 95% band."""
        from ..publish import Run
        from ..report.plots import learning_figure

        rows = []
        for _, r in self._report(store).runs.iterrows():
            h = Run.from_folder(r.folder).history
            for name in (metric, "train_loss"):
                if name in h.columns:
                    rows += [{"variant": r.variant, "seed": r.seed, "epoch": int(e), "metric": name, "value": v}
                             for e, v in zip(h.epoch, h[name]) if v == v]
        return learning_figure(pd.DataFrame(rows), metric)

    def _report(self, store: str | None) -> Report:
        if store is None:
            return next(iter(self.reports.values()))
        if store not in self.reports:
            raise WsadError(f"no store {store!r} in this study; it has: {', '.join(self.reports)}")
        return self.reports[store]

    def _one_per_variant(self, store: str | None) -> dict:
        from ..publish import Run

        runs = self._report(store).runs
        return {v: Run.from_folder(sub.sort_values("seed").folder.iloc[0])
                for v, sub in runs.groupby("variant", sort=False)}
