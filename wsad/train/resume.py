"""Interruption and resumption: a graceful stop on SIGINT/SIGTERM, and the
training state (model, optimiser, RNGs, sampler position) saved atomically so
that a resumed run ends with the same scores as an uninterrupted one."""
from __future__ import annotations

import random
import signal
import threading

import numpy as np
import torch

from ..errors import WsadError


class TrainingInterrupted(WsadError):
    """Raised after the state is saved; the exit code follows the signal."""

    def __init__(self, message: str, signum: int):
        super().__init__(message)
        self.exit_code = 128 + signum


class GracefulStop:
    """While active, SIGINT/SIGTERM only set a flag: the loop finishes the
    current step, saves, and stops. A second signal stops at once."""

    def __init__(self):
        self.signum: int | None = None
        self._previous = {}

    def __enter__(self):
        if threading.current_thread() is threading.main_thread():
            for sig in (signal.SIGINT, signal.SIGTERM):
                if signal.getsignal(sig) is signal.SIG_IGN:
                    continue   # a sweep's worker: Ctrl-C is its launcher's to handle (wsad.sweep)
                self._previous[sig] = signal.signal(sig, self._handle)
        return self

    def _handle(self, signum, frame):
        if self.signum is not None:  # second signal: give up waiting for the step
            raise KeyboardInterrupt
        self.signum = signum

    @property
    def requested(self) -> bool:
        return self.signum is not None

    def __exit__(self, *exc):
        for sig, handler in self._previous.items():
            signal.signal(sig, handler)
        return False


def rng_state() -> dict:
    """RNG states of torch, numpy and python as plain data (loadable with weights_only)."""
    np_state = np.random.get_state()
    return {"torch": torch.get_rng_state(),
            "numpy": {"key": torch.from_numpy(np_state[1].astype(np.int64)), "pos": int(np_state[2]),
                      "has_gauss": int(np_state[3]), "gauss": float(np_state[4])},
            "python": _to_lists(random.getstate())}


def set_rng_state(state: dict) -> None:
    torch.set_rng_state(state["torch"])
    n = state["numpy"]
    np.random.set_state(("MT19937", n["key"].numpy().astype(np.uint32), n["pos"], n["has_gauss"],
                         n["gauss"]))
    random.setstate(_to_tuples(state["python"]))


def _to_lists(x):
    return [_to_lists(v) for v in x] if isinstance(x, tuple) else x


def _to_tuples(x):
    return tuple(_to_tuples(v) for v in x) if isinstance(x, list) else x
