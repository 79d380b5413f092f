"""A short hash that identifies a store's content for tracking."""
from __future__ import annotations

import hashlib
from pathlib import Path

import numpy as np
import pandas as pd


def store_fingerprint(root: str | Path) -> str:
    """SHA-256 (first 16 hex digits) of manifest.csv, events.csv, store.json
    and every array's shape and dtype (values are not read: it is cheap)."""
    root = Path(root)
    h = hashlib.sha256()
    for name in ("store.json", "manifest.csv", "events.csv"):
        p = root / name
        h.update(name.encode())
        h.update(p.read_bytes() if p.is_file() else b"<absent>")
    man = pd.read_csv(root / "manifest.csv", dtype=str, keep_default_na=False)
    for v, f in zip(man["video"], man["file"]):
        try:
            a = np.load(root / f, mmap_mode="r")
            h.update(f"{v}:{a.shape}:{a.dtype}".encode())
        except Exception:  # noqa: BLE001 - an unreadable array still hashes distinctly
            h.update(f"{v}:<unreadable>".encode())
    return h.hexdigest()[:16]
