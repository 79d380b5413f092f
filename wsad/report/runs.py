"""Finished runs from MLflow, and what tells one variant from another."""
from __future__ import annotations

import pandas as pd

from ..errors import WsadError
from ..tracking import BOOKKEEPING


def load_runs(tracking_uri: str, experiment: str, filter_string: str = "") -> pd.DataFrame:
    """One row per FINISHED run: run_id, run_name, params.* and metrics.* columns."""
    from ..tracking.client import experiment_runs

    runs = experiment_runs(tracking_uri, experiment, filter_string)
    rows = []
    for r in runs:
        if r.info.status != "FINISHED" or r.data.tags.get("wsad.sweep") == "parent":
            continue   # a sweep's parent run holds no result of its own
        row = {"run_id": r.info.run_id, "run_name": r.info.run_name, "start_time": r.info.start_time}
        row.update({f"params.{k}": v for k, v in r.data.params.items()})
        row.update({f"metrics.{k}": v for k, v in r.data.metrics.items()})
        rows.append(row)
    if not rows:
        raise WsadError(f"experiment {experiment!r} has no FINISHED runs"
                        + (f" matching {filter_string!r}" if filter_string else ""))
    return pd.DataFrame(rows)


def varying_params(runs: pd.DataFrame) -> list[str]:
    """Params (without the 'params.' prefix) that take more than one value,
    leaving out the seed and per-run bookkeeping."""
    out = []
    for col in runs.columns:
        if not col.startswith("params."):
            continue
        key = col[len("params."):]
        if key.startswith(BOOKKEEPING):
            continue
        if runs[col].fillna("<unset>").nunique() > 1:
            out.append(key)
    return sorted(out)


PRIORITY = ("choice.recipe", "recipe_name", "choice.bags", "choice.head", "ablation.toggle",
            "choice.optim", "bags._target_", "bags.order", "head._target_")


def _short(v) -> str:
    v = "unset" if v is None or v != v or v == "nan" else str(v)
    return v.rsplit(".", 1)[-1] if v.startswith("wsad.") or v.startswith("torch.") else v


def label_keys(runs: pd.DataFrame, by: list[str]) -> list[str]:
    """The fewest of ``by`` that still tell every variant apart (for readable
    labels): well-known keys first, then the ones with most distinct values."""
    if not by:
        return []
    full = runs[[f"params.{k}" for k in by]].fillna("unset").astype(str).agg("|".join, axis=1)
    n_full = full.nunique()
    order = sorted(by, key=lambda k: (PRIORITY.index(k) if k in PRIORITY else len(PRIORITY),
                                      -runs[f"params.{k}"].nunique(), k))
    chosen: list[str] = []
    for k in order:
        chosen.append(k)
        part = runs[[f"params.{c}" for c in chosen]].fillna("unset").astype(str).agg("|".join, axis=1)
        if part.nunique() == n_full:
            break
    return chosen


def label_of(values: dict[str, str]) -> str:
    if not values:
        return "all runs"
    return ", ".join(f"{k.removeprefix('choice.')}={_short(v)}" for k, v in values.items())
