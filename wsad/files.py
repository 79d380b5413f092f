"""Writing a file so that a killed process never leaves half of it."""
from __future__ import annotations

import os
from collections.abc import Iterator
from contextlib import contextmanager
from pathlib import Path


@contextmanager
def atomic_path(path: str | Path) -> Iterator[Path]:
    """Yield a temporary path beside ``path``; when the block ends without an
    error the temporary file is renamed onto ``path`` (one atomic step),
    otherwise it is removed and ``path`` is untouched.

    The temporary name keeps the suffix, so writers that pick a format from it
    (matplotlib) still do; it is hidden and carries the process id, so two
    processes writing the same file never share a temporary.
    """
    path = Path(path)
    path.parent.mkdir(parents=True, exist_ok=True)
    tmp = path.with_name(f".{path.stem}.{os.getpid()}.tmp{path.suffix}")
    try:
        yield tmp
        os.replace(tmp, path)
    finally:
        tmp.unlink(missing_ok=True)
