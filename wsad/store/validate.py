"""Full validation of a store: every problem, each with the video it concerns.

Nothing here writes to the store. :func:`check_store` never raises on bad
content; it returns a list of :class:`Problem` (errors and warnings).
"""
from __future__ import annotations

import json
from dataclasses import dataclass
from pathlib import Path, PurePosixPath

import numpy as np
import pandas as pd

from .format import DTYPES, EVENT_COLUMNS, FORMAT_VERSION, MANIFEST_COLUMNS, SEGMENT_FRAMES, SPLITS, expected_segments

# Arrays are scanned for NaN/Inf in blocks so that a large store never sits in RAM.
_SCAN_BLOCK = 1 << 22


@dataclass(frozen=True)
class Problem:
    """One finding. ``video`` is "-" for store-wide problems."""

    video: str
    message: str
    severity: str = "error"  # or "warning"

    def __str__(self) -> str:
        where = "" if self.video == "-" else f"video {self.video}: "
        return f"{self.severity}: {where}{self.message}"


def _read_store_json(root: Path, out: list[Problem]) -> dict | None:
    path, example = root / "store.json", '{"format": 1, "dim": D, "segment_frames": 16}'
    if not path.is_file():
        out.append(Problem("-", f"store.json is missing; write {example} at the store root"))
        return None
    try:
        meta = json.loads(path.read_text())
    except (OSError, UnicodeDecodeError, ValueError) as err:
        out.append(Problem("-", f"store.json is not valid JSON ({err}); rewrite it as {example}"))
        return None
    if not isinstance(meta, dict):
        out.append(Problem("-", "store.json must hold a JSON object with format, dim, segment_frames"))
        return None
    ok = True
    if meta.get("format") != FORMAT_VERSION:
        out.append(Problem("-", f"store.json format is {meta.get('format')!r}; this wsad reads "
                           f"format {FORMAT_VERSION}"))
        ok = False
    for key in ("dim", "segment_frames"):
        val = meta.get(key, SEGMENT_FRAMES if key == "segment_frames" else None)
        if not isinstance(val, int) or isinstance(val, bool) or val <= 0:
            out.append(Problem("-", f"store.json {key} is {val!r}; it must be a positive integer"))
            ok = False
    fps = meta.get("fps")
    if fps is not None and (isinstance(fps, bool) or not isinstance(fps, (int, float)) or not 0 < fps < 10_000):
        out.append(Problem("-", f"store.json fps is {fps!r}; give the frames per second as a positive number"))
        ok = False
    return meta if ok else None


def _read_manifest(root: Path, out: list[Problem]) -> pd.DataFrame | None:
    path = root / "manifest.csv"
    if not path.is_file():
        out.append(Problem("-", "manifest.csv is missing; it lists "
                           "video,file,label,split,group,frames (one row per video)"))
        return None
    try:
        man = pd.read_csv(path, dtype=str, keep_default_na=False, index_col=False)  # a row with extra commas: no index
    except (OSError, UnicodeDecodeError, ValueError, pd.errors.ParserError) as err:
        out.append(Problem("-", f"manifest.csv cannot be parsed as CSV ({str(err).splitlines()[0]})"))
        return None
    missing = [c for c in MANIFEST_COLUMNS if c not in man.columns]
    if missing:
        out.append(Problem("-", f"manifest.csv lacks column(s) {missing}; "
                           f"the header must be {','.join(MANIFEST_COLUMNS)}"))
        return None
    if len(man) == 0:
        out.append(Problem("-", "manifest.csv has no rows; list at least one video"))
        return None
    return man


def _bad_relative_path(p: str) -> str | None:
    if p.strip() == "":
        return "file is empty"
    pp = PurePosixPath(p.replace("\\", "/"))
    if pp.is_absolute() or p.startswith("/") or (len(p) > 1 and p[1] == ":"):
        return f"file {p!r} is absolute; give a path relative to the store root"
    if ".." in pp.parts:
        return f"file {p!r} leaves the store ('..'); keep arrays inside the store"
    return None


def _check_rows(man: pd.DataFrame, out: list[Problem]) -> dict[str, dict]:
    """Per-row value checks; returns parsed rows of videos that are usable."""
    good: dict[str, dict] = {}
    dup = man["video"][man["video"].duplicated()].unique()
    for v in dup:
        out.append(Problem(v, "appears more than once in manifest.csv; video ids must be unique"))
    for i, (_, r) in enumerate(man.iterrows()):
        v = r["video"].strip()
        if v == "":
            out.append(Problem("-", f"manifest.csv row {i + 2} has an empty video id"))
            continue
        ok = True
        if r["label"].strip() not in ("0", "1"):
            out.append(Problem(v, f"label is {r['label']!r}; use 1 (holds an anomaly) or 0 (normal)"))
            ok = False
        if r["split"].strip() not in SPLITS:
            out.append(Problem(v, f"split is {r['split']!r}; use train or test"))
            ok = False
        if r["group"].strip() == "":
            out.append(Problem(v, "group is empty; give the camera or site id"))
            ok = False
        try:
            frames = int(r["frames"])
            if frames <= 0 or str(frames) != r["frames"].strip():
                raise ValueError
        except ValueError:
            out.append(Problem(v, f"frames is {r['frames']!r}; give the frame count as a positive integer"))
            ok = False
            frames = None
        why = _bad_relative_path(r["file"])
        if why:
            out.append(Problem(v, why))
            ok = False
        if ok and v not in dup:
            good[v] = {"file": r["file"], "label": int(r["label"]), "split": r["split"].strip(),
                       "group": r["group"].strip(), "frames": frames}
    return good


def _check_array(root: Path, v: str, row: dict, dim: int | None, seg_frames: int,
                 out: list[Problem], scan: bool) -> int | None:
    """Checks one array; returns its segment count when usable."""
    path = root / row["file"]
    if not path.exists():
        hint = " (a dangling symlink)" if path.is_symlink() else ""
        out.append(Problem(v, f"array file {row['file']} is missing{hint}"))
        return None
    try:
        arr = np.load(path, mmap_mode="r", allow_pickle=False)
    except Exception as err:  # noqa: BLE001 - any unreadable file is a problem to report
        msg = str(err).splitlines()[0] if str(err) else type(err).__name__
        out.append(Problem(v, f"array file {row['file']} is unreadable or truncated ({msg}); "
                           "re-export it with numpy.save"))
        return None
    if not isinstance(arr, np.ndarray):
        out.append(Problem(v, f"{row['file']} is not a single .npy array"))
        return None
    if arr.dtype not in DTYPES:
        out.append(Problem(v, f"dtype is {arr.dtype}; store float16 or float32"))
        return None
    if arr.ndim not in (2, 3):
        out.append(Problem(v, f"shape is {arr.shape}; expected [T, D] or [crops, T, D]"))
        return None
    if arr.size == 0:
        out.append(Problem(v, f"array is empty (shape {arr.shape})"))
        return None
    if dim is not None and arr.shape[-1] != dim:
        out.append(Problem(v, f"feature dim is {arr.shape[-1]}, store.json says {dim}"))
        return None
    t = arr.shape[-2]
    if row["frames"] is not None:
        want = expected_segments(row["frames"], seg_frames)
        if t != want:
            out.append(Problem(v, f"has {t} segments but {row['frames']} frames imply {want} "
                               f"(floor(frames/{seg_frames}), at least 1); fix frames or the array"))
            return None
    if scan:
        flat = arr.reshape(-1)
        for s in range(0, flat.size, _SCAN_BLOCK):
            if not np.isfinite(flat[s:s + _SCAN_BLOCK]).all():
                out.append(Problem(v, "holds NaN or Inf values; re-extract or repair this video"))
                return None
    return t


def _check_events(root: Path, rows: dict[str, dict], known: set[str],
                  out: list[Problem]) -> set[str]:
    """Checks events.csv; returns the videos that have at least one event."""
    path = root / "events.csv"
    if not path.is_file():
        return set()
    try:
        ev = pd.read_csv(path, dtype=str, keep_default_na=False, index_col=False)
    except (OSError, UnicodeDecodeError, ValueError, pd.errors.ParserError) as err:
        out.append(Problem("-", f"events.csv cannot be parsed as CSV ({str(err).splitlines()[0]})"))
        return set()
    missing = [c for c in EVENT_COLUMNS if c not in ev.columns]
    if missing:
        out.append(Problem("-", f"events.csv lacks column(s) {missing}; the header must be video,start,end"))
        return set()
    with_events: set[str] = set()
    spans: dict[str, list[tuple[int, int]]] = {}
    for i, (_, r) in enumerate(ev.iterrows()):
        v = r["video"].strip()
        if v not in known:
            out.append(Problem(v or "-", f"events.csv row {i + 2} names a video not in manifest.csv"))
            continue
        try:
            s, e = int(r["start"]), int(r["end"])
        except ValueError:
            out.append(Problem(v, f"events.csv row {i + 2}: start/end {r['start']!r},{r['end']!r} "
                               "are not integer frame indices"))
            continue
        if v not in rows:  # row itself was bad; already reported
            continue
        if s >= e:
            out.append(Problem(v, f"event [{s}, {e}) is empty or inverted; need start < end"))
            continue
        frames = rows[v]["frames"]
        if s < 0 or (frames is not None and e > frames):
            out.append(Problem(v, f"event [{s}, {e}) lies outside the video's frames [0, {frames})"))
            continue
        if rows[v]["label"] == 0:
            out.append(Problem(v, f"event [{s}, {e}) is on a normal video (label 0); "
                               "label the video 1 or drop the event"))
            continue
        spans.setdefault(v, []).append((s, e))
        with_events.add(v)
    for v, sp in spans.items():
        sp.sort()
        for (s0, e0), (s1, e1) in zip(sp, sp[1:]):
            if s1 < e0:
                out.append(Problem(v, f"events [{s0}, {e0}) and [{s1}, {e1}) overlap; merge them"))
    return with_events


def check_store(root: str | Path, strict: bool = False, scan_values: bool = True) -> list[Problem]:
    """Validate a store; return every problem found (empty list: clean).

    ``strict`` turns group leakage between splits into an error.
    ``scan_values`` reads every array to look for NaN/Inf.
    """
    root = Path(root)
    out: list[Problem] = []
    if not root.is_dir():
        return [Problem("-", f"{root} is not a directory")]
    meta = _read_store_json(root, out)
    man = _read_manifest(root, out)
    if man is None:
        return out
    rows = _check_rows(man, out)
    dim = meta["dim"] if meta else None
    seg_frames = meta.get("segment_frames", SEGMENT_FRAMES) if meta else SEGMENT_FRAMES
    for v, row in rows.items():
        _check_array(root, v, row, dim, seg_frames, out, scan_values)
    known = set(man["video"].str.strip())
    with_events = _check_events(root, rows, known, out)
    for v, row in rows.items():
        if row["split"] == "test" and row["label"] == 1 and v not in with_events:
            out.append(Problem(v, "anomalous test video has no events; frame-level metrics "
                               "will skip it (add its intervals to events.csv)", "warning"))
    train_groups = {r["group"] for r in rows.values() if r["split"] == "train"}
    test_groups = {r["group"] for r in rows.values() if r["split"] == "test"}
    for g in sorted(train_groups & test_groups):
        out.append(Problem("-", f"group {g!r} is in both train and test (camera leakage); "
                           "move all its videos to one split", "error" if strict else "warning"))
    for split in SPLITS:
        labels = {r["label"] for r in rows.values() if r["split"] == split}
        if rows and labels != {0, 1}:
            out.append(Problem("-", f"the {split} split lacks "
                               f"{'anomalous' if 1 not in labels else 'normal'} videos; "
                               "training and evaluation need both labels", "warning"))
    return out


def summarize(root: str | Path) -> str:
    """A one-screen summary of a (clean) store."""
    from .format import FeatureStore

    st = FeatureStore(root)
    m = st.manifest
    lines = [f"store {Path(root)}: {st.meta.get('description', '')}".rstrip(": ")]
    lines.append(f"  dim {st.dim}, {st.segment_frames} frames per segment"
                 + (f", {st.fps:g} fps" if st.fps else ", fps not given (time-based measures need it)"))
    lines.append("  split  label     videos  groups  segments   frames")
    total_seg = 0
    for split in SPLITS:
        for label, name in ((0, "normal"), (1, "anomalous")):
            sub = m[(m["split"] == split) & (m["label"] == label)]
            segs = int(sum(expected_segments(f, st.segment_frames) for f in sub["frames"]))
            total_seg += segs
            lines.append(f"  {split:<6} {name:<9} {len(sub):>6}  {sub['group'].nunique():>6}  "
                         f"{segs:>8}  {int(sub['frames'].sum()):>7}")
    lines.append(f"  groups {m['group'].nunique()} (train {m[m.split == 'train'].group.nunique()}, "
                 f"test {m[m.split == 'test'].group.nunique()}), segments {total_seg}")
    test = m[m["split"] == "test"]
    if len(test):
        ev = st.events[st.events["video"].isin(set(test["video"]))]
        share = float((ev["end"] - ev["start"]).sum()) / max(1, int(test["frames"].sum()))
        lines.append(f"  anomalous-frame share (test) {share:.2%}")
    crops = {st.raw(v).shape[0] if st.raw(v).ndim == 3 else 1 for v in m["video"][:50]}
    lines.append(f"  views per segment {sorted(crops)}; dtype {st.raw(m['video'].iloc[0]).dtype}")
    return "\n".join(lines)

