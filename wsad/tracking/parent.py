"""A sweep's parent run: the launcher opens it, its trials become its child runs.

The launcher (:class:`wsad.sweep.PrepareTracking`) names a file before its workers start and
writes the parent run's id into it once the run exists (it makes the store first, in a thread,
while the workers import). A trial reads the id, waiting while the launcher is still at it."""
from __future__ import annotations

import os
import socket
import time
from pathlib import Path

from ..files import atomic_path
from .sqlite import process_alive

#: "host pid path": the file the launching process writes its parent run id into.
PARENT_FILE = "WSAD_SWEEP_PARENT"
#: The parent run's id itself (a study sets it in its worker for the duration of one run).
PARENT_ID = "WSAD_PARENT_RUN_ID"


def announce(path: Path) -> None:
    """Tell the workers this process starts where the parent run's id will be."""
    os.environ[PARENT_FILE] = f"{socket.gethostname()} {os.getpid()} {Path(path).resolve()}"


def forget() -> None:
    """The sweep is over: later runs of this process are no trials of it."""
    os.environ.pop(PARENT_FILE, None)


def publish(path: Path, run_id: str) -> None:
    with atomic_path(path) as tmp:
        tmp.write_text(run_id)


def parent_run_id(timeout: float = 120.0) -> str | None:
    """The parent run of the sweep this process is a trial of (None outside a sweep, or when the
    launcher is gone without making one)."""
    if os.environ.get(PARENT_ID):
        return os.environ[PARENT_ID]
    host, pid, where = (os.environ.get(PARENT_FILE, "").split(" ", 2) + ["", "", ""])[:3]
    if not where:
        return None
    path, deadline = Path(where), time.monotonic() + timeout
    local = host == socket.gethostname() and pid.isdigit()
    while not path.is_file() and time.monotonic() < deadline and (not local or process_alive(int(pid))):
        time.sleep(0.05)
    return path.read_text().strip() or None if path.is_file() else None
