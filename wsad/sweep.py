"""Hydra hooks for sweeps: the tracking store is made once, as workers start, and the sweep is
one parent run in MLflow whose trials are its child runs."""
from __future__ import annotations

import gc
import os
import threading
from pathlib import Path
from typing import Any

from hydra.experimental.callback import Callback
from omegaconf import DictConfig


class PrepareTracking(Callback):
    """At multirun start, create the MLflow store, the experiment and the sweep's parent run in
    the launching process (several processes migrating a fresh SQLite store at once break it).

    A local SQLite store is made in a thread while the launcher starts its workers: importing
    MLflow and migrating a fresh store took ~3 s of every sweep's start, measured here, and the
    workers spend that long importing torch. A worker that gets to the store first waits for
    it (or, were this process gone, builds its own copy off to the side; the first complete
    one is linked into place: :func:`wsad.tracking.sqlite.ensure_sqlite_store`), and waits for
    the parent run's id likewise (:mod:`wsad.tracking.parent`). A tracking server is asked
    before any worker starts, so refused credentials are one line, once."""

    def __init__(self) -> None:
        self._thread: threading.Thread | None = None
        self._error: BaseException | None = None
        self._parent = None

    def __getstate__(self) -> dict:  # the launcher may pickle the callbacks for its workers
        return {}

    def __setstate__(self, state: dict) -> None:
        self.__init__()

    def on_multirun_start(self, config: DictConfig, **kwargs: Any) -> None:
        from . import tracking
        from .tracking import parent, sqlite

        os.environ.setdefault("WSAD_LAUNCH_DIR", os.getcwd())
        if not config.tracking.get("enabled", True):
            return
        uri, experiment = tracking.resolve_uri(str(config.tracking.uri)), str(config.tracking.experiment)
        from omegaconf import OmegaConf

        sweep_dir = Path(str(OmegaConf.select(config, "hydra.sweep.dir", default=os.getcwd())))
        sweep_dir.mkdir(parents=True, exist_ok=True)
        id_file = sweep_dir / f".wsad_parent_run.{os.getpid()}"
        parent.announce(id_file)
        overrides = list(OmegaConf.select(config, "hydra.overrides.task", default=[]) or [])
        if not uri.startswith("sqlite:///"):
            self._prepare(uri, experiment, id_file, overrides)
            if self._error is not None:
                raise self._error
            return
        sqlite.announce_preparing(Path(uri[len("sqlite:///"):]))   # the workers wait for it
        self._thread = threading.Thread(target=self._prepare, args=(uri, experiment, id_file, overrides),
                                        daemon=True, name="wsad-prepare-tracking")
        self._thread.start()

    def _prepare(self, uri: str, experiment: str, id_file: Path, overrides: list[str]) -> None:
        from . import tracking
        from .tracking import parent
        from .tracking.client import TrackedRun

        try:
            tracking.prepare(uri, experiment)
            self._parent = TrackedRun.start(uri, experiment, "sweep " + " ".join(overrides),
                                            {"sweep.overrides": " ".join(overrides)[:500]}, {"wsad.sweep": "parent"})
            parent.publish(id_file, self._parent.run_id)
        except BaseException as err:  # noqa: BLE001 - raised again when the sweep ends
            self._error = err

    def on_multirun_end(self, config: DictConfig, **kwargs: Any) -> None:
        from .tracking import parent

        gc.freeze()  # the process ends now: its exit need not walk every object (~0.8 s measured)
        parent.forget()
        if self._thread is not None:
            self._thread.join()
        if self._error is not None:
            raise self._error
        if self._parent is not None:
            self._parent.finish("FINISHED")
