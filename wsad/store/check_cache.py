"""A clean store check remembered, so the runs of a sweep do not re-read every array.

The key covers what a check reads: ``store.json``, ``manifest.csv`` and ``events.csv`` byte for
byte, and each array file's size, modification time and inode (a re-exported array changes at
least one). A store with errors is never remembered. The record lives in this process and in the
user's cache folder (``$XDG_CACHE_HOME/wsad/store-checks`` or ``~/.cache/...``), never inside the
store: the store is the user's and is not written to."""
from __future__ import annotations

import hashlib
import os
from pathlib import Path

import pandas as pd

from .validate import Problem, check_store

_CLEAN: set[str] = set()


def _cache_dir() -> Path:
    base = os.environ.get("XDG_CACHE_HOME") or os.path.join(os.path.expanduser("~"), ".cache")
    return Path(base) / "wsad" / "store-checks"


def check_key(root: str | Path) -> str | None:
    """The key of the store's current content (None when it cannot be read: no caching)."""
    root = Path(root).resolve()
    h = hashlib.sha256(str(root).encode())
    try:
        for name in ("store.json", "manifest.csv", "events.csv"):
            p = root / name
            h.update(name.encode() + (p.read_bytes() if p.is_file() else b"<absent>"))
        man = pd.read_csv(root / "manifest.csv", dtype=str, keep_default_na=False)
        for f in man["file"]:
            st = os.stat(root / f)
            h.update(f"{f}:{st.st_size}:{st.st_mtime_ns}:{st.st_ino}".encode())
    except (OSError, ValueError, KeyError, pd.errors.ParserError):
        return None
    return h.hexdigest()


def errors_of(root: str | Path) -> list[Problem]:
    """The errors of ``check_store(root)`` (warnings left out), skipping the full check when
    this exact content was found clean before."""
    key = check_key(root)
    marker = _cache_dir() / key if key else None
    if key and (key in _CLEAN or marker.is_file()):
        _CLEAN.add(key)
        return []
    errors = [p for p in check_store(root) if p.severity == "error"]
    if key and not errors:
        _CLEAN.add(key)
        try:
            marker.parent.mkdir(parents=True, exist_ok=True)
            marker.touch()
        except OSError:
            pass   # a read-only home: the in-process record still helps a sweep worker
    return errors
