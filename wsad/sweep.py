"""Hydra hooks for sweeps: the tracking store is made once, as workers start, and the sweep is
one parent run in MLflow whose trials are its child runs; and the trials of
``hydra/launcher=workers`` (:mod:`hydra_plugins.wsad_workers.launcher`).

Why a launcher of our own: with joblib's, every worker starts after Hydra has composed the
sweep and then imports torch, torch's compiler stack, MLflow and pandas (seconds each), and
every trial composes its config again and unpickles Hydra's whole config store. Here
``wsad-train -m ... hydra/launcher=workers`` starts its workers first thing (:func:`start_workers`),
so their imports overlap the launcher's own start; the launcher composes each trial once and
a worker takes the next one as it frees up. The measurement is in benchmarks/sweep.py."""
from __future__ import annotations

import gc
import os
import pickle
import signal
import sys
import tempfile
import threading
from pathlib import Path
from typing import Any

from hydra.experimental.callback import Callback
from omegaconf import DictConfig

#: where a stopped sweep tells its queued trials not to start
STOP_FILE = "WSAD_SWEEP_STOP"
#: ``hydra.launcher.n_jobs`` of conf/hydra/launcher/workers.yaml (tested equal)
DEFAULT_JOBS = 2


def workers_wanted(argv: list[str]) -> int:
    """How many workers ``wsad-train argv`` will run its sweep on with our launcher (0: none)."""
    if not any(a in ("-m", "--multirun") for a in argv) or "hydra/launcher=workers" not in argv:
        return 0
    jobs = [a.split("=", 1)[1] for a in argv if a.startswith("hydra.launcher.n_jobs=")]
    return int(jobs[-1]) if jobs and jobs[-1].isdigit() and int(jobs[-1]) > 0 else DEFAULT_JOBS


def start_workers(argv: list[str]) -> None:
    """Start the sweep's workers before Hydra composes it (their imports take seconds), and
    make the launcher known to Hydra: its scan of the ``hydra_plugins`` namespace does not see
    packages of an editable install (``Plugins.register`` is Hydra's way for that)."""
    jobs = workers_wanted(argv)
    if jobs:
        from hydra.core.plugins import Plugins

        from hydra_plugins.wsad_workers.launcher import WorkersLauncher

        from . import workers

        workers.warm(jobs)
        Plugins.instance().register(WorkersLauncher)


def run_trials(jobs: int, configs, hydra_context, task_function) -> list:
    """Every trial (its composed config, submitted as it comes) on ``jobs`` workers, the next one to the first that
    frees up; Hydra's job returns in order. A trial that fails does not stop the others (its
    error is raised once all have ended); Ctrl-C stops them all (each keeps its resume state)."""
    from concurrent.futures import wait

    import cloudpickle  # Hydra's state holds OmegaConf's resolvers, local functions
    from hydra.core.singleton import Singleton

    from . import workers

    task = (task_function.__module__, task_function.__qualname__)
    shared = cloudpickle.dumps((hydra_context, task, Singleton.get_state()))
    stop = Path(tempfile.gettempdir()) / f"wsad-sweep-stop.{os.getpid()}"
    env = {**os.environ, STOP_FILE: str(stop)}
    asked: list[int] = []
    previous = {sig: signal.signal(sig, lambda signum, _: asked.append(signum))
                for sig in (signal.SIGINT, signal.SIGTERM)}
    try:
        futures = []
        for cfg in configs:
            if asked:
                break
            futures.append(workers.call(jobs, run_trial, cfg, shared, env))
        pending = set(futures)
        while pending and not asked:
            _, pending = wait(pending, timeout=0.2)
        if asked:   # the workers ignore Ctrl-C: stop them here, each running trial keeping its state
            stop.touch()
            workers.terminate(jobs)
            print(f"wsad-train: sweep stopped by signal {asked[0]}; each stopped trial printed how to "
                  "resume it (trainer.resume=RUN_ID)", file=sys.stderr)
            sys.exit(128 + asked[0])
    finally:
        for sig, handler in previous.items():
            signal.signal(sig, handler)
        stop.unlink(missing_ok=True)
    return [pickle.loads(f.result()) for f in futures]


def run_trial(cfg: DictConfig, shared: bytes, env: dict):
    """One trial in a worker, as Hydra's own launchers run one: its output folder, its logging,
    the job callbacks, the task function. ``shared``: Hydra's context, the task (module and
    name; the undecorated function behind ``hydra.main``) and Hydra's global state, pickled.
    The launcher's environment is the trial's (the sweep's parent run is announced there after
    the worker started)."""
    import importlib

    import cloudpickle
    from hydra.core.singleton import Singleton
    from hydra.core.utils import run_job, setup_globals

    if Path(env.get(STOP_FILE, "")).is_file():
        return None   # the sweep was stopped while this trial waited
    hydra_context, task, state = pickle.loads(shared)

    fn = getattr(importlib.import_module(task[0]), task[1])
    fn = getattr(fn, "__wrapped__", fn)
    setup_globals()
    Singleton.set_state(state)
    saved = dict(os.environ)
    os.environ.clear()
    os.environ.update(env)
    try:
        ret = run_job(hydra_context=hydra_context, task_function=fn, config=cfg,
                      job_dir_key="hydra.sweep.dir", job_subdir_key="hydra.sweep.subdir")
        return cloudpickle.dumps(ret)   # its configs hold classes Hydra's plugin scan made twice
    finally:
        os.environ.clear()
        os.environ.update(saved)


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
