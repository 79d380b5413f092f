"""Where a process's wall time goes: named marks on one clock that starts with the process.

``WSAD_TIMELINE=1`` makes ``wsad-train`` print them at its end as one line,
``wsad-timeline {"imports": s, "config": s, ...}`` (seconds since the process started, each
mark the end of its stage); ``benchmarks/plain_vs_wsad.py`` reads it. Marks cost a clock read.
"""
from __future__ import annotations

import json
import os
import time

_MARKS: dict[str, float] = {}


def _process_start() -> float:
    """The monotonic time the process started (Linux: /proc; elsewhere: this module's import)."""
    try:
        ticks = int(open("/proc/self/stat").read().rsplit(")", 1)[1].split()[19])
        uptime = float(open("/proc/uptime").read().split()[0])
        return time.monotonic() - (uptime - ticks / os.sysconf("SC_CLK_TCK"))
    except (OSError, ValueError, IndexError):
        return time.monotonic()


_START = _process_start()


def mark(stage: str) -> None:
    """``stage`` ended now."""
    _MARKS[stage] = round(time.monotonic() - _START, 3)


def line() -> str | None:
    """The marks as one printable line when ``WSAD_TIMELINE`` is set, else None."""
    if not os.environ.get("WSAD_TIMELINE"):
        return None
    return "wsad-timeline " + json.dumps(_MARKS)
