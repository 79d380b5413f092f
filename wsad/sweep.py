"""Hydra hooks for sweeps: the tracking store is made once, before workers start."""
from __future__ import annotations

import os
from typing import Any

from hydra.experimental.callback import Callback
from omegaconf import DictConfig


class PrepareTracking(Callback):
    """At multirun start, create the MLflow store and experiment in the
    launching process. Workers then only open an existing, migrated store
    (several processes migrating a fresh SQLite store at once break it)."""

    def on_multirun_start(self, config: DictConfig, **kwargs: Any) -> None:
        from . import tracking

        os.environ.setdefault("WSAD_LAUNCH_DIR", os.getcwd())
        if config.tracking.get("enabled", True):
            tracking.prepare(tracking.resolve_uri(str(config.tracking.uri)),
                             str(config.tracking.experiment))
