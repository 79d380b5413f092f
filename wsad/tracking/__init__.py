"""Tracking runs in MLflow: an explicit client and run id (:mod:`.client`, the one module
that imports MLflow), what a run records (:mod:`.params`), what a failure means
(:mod:`.errors`), and a fresh SQLite store made safely (:mod:`.sqlite`)."""
from __future__ import annotations

import os
from pathlib import Path

from .errors import TrackingUnavailable, read_failure, retry
from .params import BOOKKEEPING, flatten, run_name, run_params, standard_tags

__all__ = ["TrackingUnavailable", "read_failure", "retry", "BOOKKEEPING", "flatten", "run_name", "run_params",
           "standard_tags", "prepare", "resolve_uri"]


def resolve_uri(uri: str) -> str:
    """Relative sqlite paths are taken from the directory the user ran in
    (Hydra may change the working directory)."""
    if uri.startswith("sqlite:///") and not uri.startswith("sqlite:////"):
        base = os.environ.get("WSAD_LAUNCH_DIR") or os.getcwd()
        return "sqlite:///" + str(Path(base) / uri[len("sqlite:///"):])
    return uri


def prepare(uri: str, experiment: str) -> str:
    """Create (or open) the tracking store and the experiment; returns its id.

    Call this once before parallel workers start: several processes opening
    a fresh SQLite store at once race on its schema migration.
    """
    from .client import experiment_id

    return experiment_id(uri, experiment)   # the client makes a SQLite store whole first
