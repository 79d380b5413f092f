"""Making a fresh SQLite tracking store safely, once per sweep.

MLflow migrates a new store's schema in many steps; two processes doing it at once,
or one killed midway, leave a store that no longer opens. The store is built off to
the side and linked into place whole; a sweep's launcher makes it and its workers wait.
"""
from __future__ import annotations

import os
import socket
import threading
import time
from collections.abc import Callable
from pathlib import Path

#: "host pid path": the launching process of a sweep is making the SQLite store at path
#: (:class:`wsad.sweep.PrepareTracking`); its workers inherit this and wait for it.
LAUNCHER_PREPARES = "WSAD_LAUNCHER_PREPARES"
_PREPARING = threading.Lock()


def announce_preparing(path: Path) -> None:
    """Tell the workers this process starts that it makes the store at ``path``."""
    os.environ[LAUNCHER_PREPARES] = f"{socket.gethostname()} {os.getpid()} {path}"


def _wait_for_launcher(path: Path, timeout: float = 120.0) -> None:
    """Wait while the launching process makes the store at ``path`` instead of migrating a
    second copy beside it: measured here, three processes migrating at once on two cores
    took 8 s where one took 3. Stops waiting when that process is gone, or elsewhere (then
    this one builds its own copy, which is safe, only slower)."""
    host, pid, where = (os.environ.get(LAUNCHER_PREPARES, "").split(" ", 2) + ["", "", ""])[:3]
    if where != str(path) or host != socket.gethostname() or not pid.isdigit() or int(pid) == os.getpid():
        return
    deadline = time.monotonic() + timeout
    while not path.exists() and time.monotonic() < deadline and process_alive(int(pid)):
        time.sleep(0.05)


def process_alive(pid: int) -> bool:
    """Whether process ``pid`` on this machine still exists (one owned by another user counts)."""
    try:
        os.kill(pid, 0)
    except ProcessLookupError:
        return False
    except PermissionError:
        return True
    return True


def ensure_sqlite_store(uri: str, migrate: Callable[[Path], None]) -> None:
    """Create a fresh SQLite tracking store off to the side and move it into place.

    MLflow migrates a new store's schema in many steps; a process killed midway, or a
    second process migrating at the same time, leaves a store that no longer opens.
    Built under a temporary name and linked into place only when complete (a link
    never overwrites: the first complete store wins), the store at ``uri`` is always
    either absent or whole. One thread of a process at a time: a sweep's launching thread
    (:class:`wsad.sweep.PrepareTracking`) and a run in the same process may both get here.
    ``migrate(path)`` makes a fresh store at ``path`` (:func:`wsad.tracking.client.migrate`)."""
    if not uri.startswith("sqlite:///"):
        return
    path = Path(uri[len("sqlite:///"):])
    with _PREPARING:
        _wait_for_launcher(path)
        if not path.exists():
            _migrate_beside(path, migrate)


def _migrate_beside(path: Path, migrate: Callable[[Path], None]) -> None:
    path.parent.mkdir(parents=True, exist_ok=True)
    tmp = path.with_name(f".{path.name}.{os.getpid()}-{threading.get_ident()}.init")
    tmp.unlink(missing_ok=True)
    migrate(tmp)
    try:
        os.link(tmp, path)
    except FileExistsError:
        pass  # another process finished first; its store is as good as ours
    finally:
        tmp.unlink(missing_ok=True)
