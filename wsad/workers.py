"""Worker processes that live as long as the Python process (a notebook kernel, a sweep's
launcher): a second study in the same kernel pays no start-up.

The workers are spawned (each imports torch, the training code and MLflow itself,
:mod:`wsad.preload`), never forked: a process that imported torch and MLflow already runs native
threads of theirs (measured), and a child forked from it can wait forever on a lock such a thread
held. A fork server with that preload was tried (0.64 sweep efficiency against 0.57 spawned) and
withdrawn for that reason.
"""
from __future__ import annotations

import atexit
import os
import time
import traceback
from concurrent.futures import Future, ProcessPoolExecutor
from concurrent.futures.process import BrokenProcessPool
from multiprocessing import get_context
from pathlib import Path

from .tracking.parent import PARENT_ID

_POOLS: dict[int, ProcessPoolExecutor] = {}


def _warm() -> None:
    """Import what every run needs (:mod:`wsad.preload`). Ctrl-C (or a kernel
    interrupt) reaches the process group: the parent decides, the workers do not die mid-run
    with a traceback."""
    import signal

    signal.signal(signal.SIGINT, signal.SIG_IGN)
    import torch

    from . import preload  # noqa: F401

    torch.set_num_threads(1)


def execute(spec, out_dir: str, parent: str | None = None, settings: dict | None = None) -> dict:
    """Train one run (in a worker or in this process): ``{"ok", "error", "seconds", "run_id"}``.
    ``spec``: a :class:`~wsad.study.spec.RunSpec` (its config composed when the study was
    planned, so a worker does not compose it again); ``settings``: keys set on top
    (``{"trainer.threads": 1}``)."""
    import warnings

    from .errors import WsadError
    from .train import train

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
        from .config import compose_config

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


def warm(jobs: int) -> None:
    """Start the ``jobs`` workers now, so that their imports run while this process does other
    work (the executor starts a process per submitted task while none is idle)."""
    import threading

    p = pool(jobs)
    # a submit waits for the fork server to finish its imports: not on this thread
    threading.Thread(target=lambda: [p.submit(int) for _ in range(jobs)], daemon=True,
                     name="wsad-start-workers").start()


def call(jobs: int, fn, *args) -> Future:
    """``fn(*args)`` on the pool (``fn`` importable by name: the workers are spawned)."""
    return pool(jobs).submit(fn, *args)


def terminate(jobs: int) -> None:
    """Stop the pool: what has not started is cancelled, each running run gets one SIGTERM (it
    saves its resume state and stops), and this waits for them."""
    p = _POOLS.pop(jobs, None)
    if p is None:
        return
    running = list((getattr(p, "_processes", None) or {}).values())   # shutdown forgets them
    p.shutdown(wait=False, cancel_futures=True)
    for proc in running:
        proc.terminate()
    for proc in running:
        proc.join()


def shutdown() -> None:
    """Stop the workers (they also stop with the kernel)."""
    for jobs in list(_POOLS):
        _POOLS.pop(jobs).shutdown(wait=True, cancel_futures=True)


atexit.register(shutdown)
