"""Worker processes that live as long as the Python process (a notebook kernel): they import
torch, the training code and MLflow once, so a second study in the same kernel pays no start-up.

A run that fails comes back as its error (one line), never as an exception that would lose the
other runs."""
from __future__ import annotations

import atexit
import os
import time
import traceback
from concurrent.futures import Future, ProcessPoolExecutor
from concurrent.futures.process import BrokenProcessPool
from multiprocessing import get_context
from pathlib import Path

from ..tracking.parent import PARENT_ID

_POOLS: dict[int, ProcessPoolExecutor] = {}


def _warm() -> None:
    """Import what every run needs once per worker. Ctrl-C (or a kernel interrupt) reaches the
    process group: the parent decides, the workers do not die mid-run with a traceback."""
    import signal

    signal.signal(signal.SIGINT, signal.SIG_IGN)
    os.environ.setdefault("MLFLOW_DISABLE_TELEMETRY", "true")
    import torch

    torch.set_num_threads(1)
    import wsad.config  # noqa: F401
    import wsad.train  # noqa: F401
    from wsad.tracking.client import load

    load()


def execute(spec, out_dir: str, parent: str | None = None, settings: dict | None = None) -> dict:
    """Train one run (in a worker or in this process): ``{"ok", "error", "seconds", "run_id"}``.
    ``spec``: a :class:`~wsad.study.spec.RunSpec` (its config composed when the study was
    planned, so a worker does not compose it again); ``settings``: keys set on top
    (``{"trainer.threads": 1}``)."""
    import warnings

    from ..errors import WsadError
    from ..train import train

    started = time.perf_counter()
    if parent:
        os.environ[PARENT_ID] = parent
    try:
        with warnings.catch_warnings():
            warnings.simplefilter("ignore")   # the run keeps its own warnings in summary.json
            cfg, overrides = _config(spec, {**(settings or {}), "trainer.out_dir": out_dir,
                                            "trainer.progress": False})
            res = train(cfg, overrides)
        return {"ok": True, "error": None, "seconds": time.perf_counter() - started, "run_id": res.run_id}
    except WsadError as err:
        return {"ok": False, "error": str(err), "seconds": time.perf_counter() - started, "run_id": None}
    except Exception as err:  # noqa: BLE001 - any failure becomes the run's row
        where = traceback.extract_tb(err.__traceback__)[-1]
        return {"ok": False, "error": f"{type(err).__name__}: {err} ({Path(where.filename).name}:{where.lineno})",
                "seconds": time.perf_counter() - started, "run_id": None}
    finally:
        os.environ.pop(PARENT_ID, None)


def _config(spec, settings: dict):
    """The run's config with ``settings`` set, and the overrides that name the run."""
    from omegaconf import OmegaConf, open_dict

    if spec.config is None:   # a spec made without composing (the study composes every one)
        from ..config import compose_config

        cfg = compose_config(list(spec.overrides))
    else:
        cfg = spec.config.copy()
    with open_dict(cfg):
        for key, value in settings.items():
            OmegaConf.update(cfg, key, value, merge=False)
    return cfg, list(spec.overrides)


def pool(jobs: int) -> ProcessPoolExecutor:
    """The kernel-lifetime pool of ``jobs`` workers (started on first use, kept for later studies)."""
    p = _POOLS.get(jobs)
    if p is None or getattr(p, "_broken", False):
        for other in list(_POOLS):   # one pool at a time: workers hold memory
            _POOLS.pop(other).shutdown(wait=False, cancel_futures=True)
        p = ProcessPoolExecutor(jobs, mp_context=get_context("spawn"), initializer=_warm)
        _POOLS[jobs] = p
    return p


def submit(jobs: int, spec, out_dir: str, parent: str | None, settings: dict | None = None) -> Future:
    """One run on the pool; a pool broken by a crashed worker is replaced once."""
    try:
        return pool(jobs).submit(execute, spec, out_dir, parent, settings)
    except BrokenProcessPool:
        _POOLS.pop(jobs, None)
        return pool(jobs).submit(execute, spec, out_dir, parent, settings)


def shutdown() -> None:
    """Stop the workers (they also stop with the kernel)."""
    for jobs in list(_POOLS):
        _POOLS.pop(jobs).shutdown(wait=True, cancel_futures=True)


atexit.register(shutdown)
