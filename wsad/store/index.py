"""Build a store from one's own ``.npy`` arrays and a labels CSV.

The user's arrays are never modified: the store links to them (symlinks, the
default) or holds copies (``copy=True``). The store is assembled in a
temporary folder beside ``out`` and renamed into place at the end, so an
interrupted build leaves nothing half-written under ``out``.
"""
from __future__ import annotations

import os
import re
import shutil
from pathlib import Path

import numpy as np
import pandas as pd

from ..errors import WsadError
from .atomic import new_store_dir, refuse_existing, write_store_json
from .format import MANIFEST_COLUMNS, SEGMENT_FRAMES

LABEL_COLUMNS = ["video", "label", "split"]


def _safe_name(video: str, taken: set[str]) -> str:
    base = re.sub(r"[^A-Za-z0-9._-]+", "_", video).strip("._") or "video"
    name, k = base, 1
    while name in taken:
        k += 1
        name = f"{base}_{k}"
    taken.add(name)
    return name


def build_store(features_dir: str | Path, labels_csv: str | Path, out: str | Path,
                events_csv: str | Path | None = None, copy: bool = False,
                segment_frames: int = SEGMENT_FRAMES, description: str = "", fps: float | None = None) -> Path:
    """Create a store at ``out`` (which must not exist, or be an empty folder).

    ``labels_csv`` has columns ``video,label,split`` and optionally ``group``
    and ``frames``; the array of video ``v`` is ``features_dir/v.npy``.
    Missing ``group`` makes each video its own group; missing ``frames``
    becomes ``T * segment_frames``.
    """
    features_dir, out = Path(features_dir), Path(out)
    if fps is not None and not 0 < float(fps) < 10_000:
        raise WsadError(f"--fps {fps}: give the footage's frames per second as a positive number (e.g. 25)")
    if not features_dir.is_dir():
        raise WsadError(f"features folder {features_dir} does not exist")
    refuse_existing(out, "--out", "wsad-index")
    try:
        labels = pd.read_csv(labels_csv, dtype=str, keep_default_na=False)
    except (OSError, ValueError, pd.errors.ParserError) as err:
        raise WsadError(f"labels CSV {labels_csv} is unreadable ({str(err).splitlines()[0]})") from None
    missing = [c for c in LABEL_COLUMNS if c not in labels.columns]
    if missing:
        raise WsadError(f"labels CSV {labels_csv} lacks column(s) {missing}; "
                        "need video,label,split[,group][,frames]")
    absent = [v for v in labels["video"] if not (features_dir / f"{v}.npy").is_file()]
    if absent:
        more = f" and {len(absent) - 3} more" if len(absent) > 3 else ""
        raise WsadError(f"no array for video(s) {', '.join(absent[:3])}{more} in {features_dir} "
                        "(expected FEATURES_DIR/<video>.npy)")
    ev = None
    if events_csv is not None:
        try:
            ev = pd.read_csv(events_csv, dtype=str, keep_default_na=False)
        except (OSError, ValueError, pd.errors.ParserError) as err:
            raise WsadError(f"events CSV {events_csv} is unreadable ({str(err).splitlines()[0]})") from None

    rows, dims, taken = [], set(), set()
    for r in labels.itertuples(index=False):
        src = (features_dir / f"{r.video}.npy").resolve()
        try:
            arr = np.load(src, mmap_mode="r", allow_pickle=False)
            shape = arr.shape
        except Exception as err:  # noqa: BLE001 - reported by name, checked again later
            raise WsadError(f"video {r.video}: {src.name} is unreadable ({err}); "
                            "re-export it with numpy.save") from None
        if len(shape) not in (2, 3):
            raise WsadError(f"video {r.video}: shape {shape}; expected [T, D] or [crops, T, D]")
        dims.add(shape[-1])
        frames = getattr(r, "frames", "") if "frames" in labels.columns else ""
        group = getattr(r, "group", "") if "group" in labels.columns else ""
        rows.append({"video": r.video, "src": src, "name": _safe_name(r.video, taken),
                     "label": r.label, "split": r.split, "group": group or r.video,
                     "frames": frames or str(shape[-2] * segment_frames)})
    if len(dims) != 1:
        raise WsadError(f"arrays have different feature dims {sorted(dims)}; one store holds one dim")

    with new_store_dir(out, "--out", "wsad-index") as tmp:
        for r in rows:
            dst = tmp / "features" / f"{r['name']}.npy"
            if copy:
                shutil.copyfile(r["src"], dst)
            else:
                os.symlink(r["src"], dst)
        man = pd.DataFrame([{"video": r["video"], "file": f"features/{r['name']}.npy",
                             "label": r["label"], "split": r["split"], "group": r["group"],
                             "frames": r["frames"]} for r in rows], columns=MANIFEST_COLUMNS)
        man.to_csv(tmp / "manifest.csv", index=False)
        if ev is not None:
            ev.to_csv(tmp / "events.csv", index=False)
        extra = {} if fps is None else {"fps": float(fps)}
        write_store_json(tmp, dims.pop(), segment_frames, description or f"indexed from {features_dir}", **extra)
    return out
