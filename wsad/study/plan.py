"""A study's plan: the runs it implies, what is done, and the seeds each comparison needs."""
from __future__ import annotations

from html import escape

import pandas as pd


class Plan:
    """The runs a study implies (``runs``: store, variant, seed, status), and with an effect size
    the seeds each comparison needs (``seeds``)."""

    def __init__(self, study, effect: float | None, power: float):
        self.study, self.effect, self.power = study, effect, power
        self.runs = study.runs()
        self.seeds = self._seeds() if effect is not None else None

    def _seeds(self) -> pd.DataFrame:
        from ..report.planning import plan_table

        s = self.study
        comparisons = max(len(s.variants) - 1, 1)   # Holm's first step: the strictest level the study uses
        tables = []
        for store, rep in s.report().reports.items():
            t = plan_table(rep.table[rep.table.metric == s.primary], rep.baseline, self.effect, self.power,
                           s.alpha, comparisons)
            tables.append(t.assign(store=store))
        return pd.concat(tables, ignore_index=True) if tables else pd.DataFrame()

    def counts(self) -> dict[str, int]:
        return self.runs.status.value_counts().to_dict()

    def __repr__(self) -> str:
        c = self.counts()
        text = (f"study {self.study.name}: {len(self.runs)} runs ({len(self.study.stores)} store(s) x "
                f"{len(self.study.variants)} variant(s) x {len(self.study.seeds)} seed(s)); "
                + ", ".join(f"{v} {k}" for k, v in c.items()))
        if self.seeds is not None and len(self.seeds):
            text += "\n" + self.seeds.to_string(index=False)
        return text

    def _repr_html_(self) -> str:
        head = escape(repr(self).splitlines()[0])
        seeds = "" if self.seeds is None or not len(self.seeds) else (
            f"<p>Seeds needed to detect {self.effect:g} in {escape(self.study.primary)} with power {self.power} "
            f"(paired t at alpha {self.seeds.alpha.iloc[0]:.4g}, the level Holm's adjustment starts from)"
            "</p>" + self.seeds.drop(columns="alpha").to_html(index=False))
        return f"<p>{head}</p>{self.runs.drop(columns='folder').to_html(index=False)}{seeds}"
