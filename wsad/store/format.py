"""Reading a store. Arrays are opened as memory maps, one video at a time."""
from __future__ import annotations

import json
from pathlib import Path

import numpy as np
import pandas as pd

from ..errors import WsadError

FORMAT_VERSION = 1
MANIFEST_COLUMNS = ["video", "file", "label", "split", "group", "frames"]
EVENT_COLUMNS = ["video", "start", "end"]
SPLITS = ("train", "test")
DTYPES = (np.dtype("float16"), np.dtype("float32"))
CROP_MODES = ("mean", "each")

#: Frames per segment when ``store.json`` does not say (the common 16-frame snippet).
SEGMENT_FRAMES = 16


def expected_segments(frames: int, segment_frames: int = SEGMENT_FRAMES) -> int:
    """Segments of a video of ``frames`` frames: segment t covers frames
    [F t, F t + F) with F = ``segment_frames``; the last one also covers the
    tail (so floor, at least 1)."""
    return max(1, int(frames) // int(segment_frames))


def segments_to_frames(segment_scores: np.ndarray, frames: int,
                       segment_frames: int = SEGMENT_FRAMES) -> np.ndarray:
    """Repeat each segment's value over its frames; the tail takes the last segment."""
    s = np.asarray(segment_scores)
    idx = np.minimum(np.arange(int(frames)) // segment_frames, len(s) - 1)
    return s[idx]


def crop_mean(arr: np.ndarray) -> np.ndarray:
    """``[V, T, D]`` crops -> their float32 mean ``[T, D]``: crop 0 + crop 1 + ... in float32,
    then / V, the sums ``arr.mean(axis=0, dtype=np.float32)`` makes in the same order (the
    results are bit-identical; tests/test_store.py checks it against numpy), 4x faster on
    float16 crops: torch converts in vectorised loops, numpy's cast loop took 13 s per pass over
    the 10-view research-scale store's training videos (benchmarks/research.py)."""
    import torch

    # numpy allocates the two arrays and torch only works in them: torch's own temporaries (a
    # converted copy of each crop) left the heap 0.3 GB fragmented over one epoch
    out, buf = np.empty(arr.shape[1:], np.float32), np.empty(arr.shape[1:], np.float32)
    t, acc, conv = torch.from_numpy(arr), torch.from_numpy(out), torch.from_numpy(buf)
    acc.copy_(t[0])
    for k in range(1, t.shape[0]):
        acc.add_(conv.copy_(t[k]))
    acc.div_(t.shape[0])
    return out


class FeatureStore:
    """A validated-on-demand view of a store directory.

    Parameters
    ----------
    root : path of the store.
    crops : ``"mean"`` averages the views of ``[crops, T, D]`` arrays into one
        ``[T, D]`` view; ``"each"`` keeps every crop as its own view.

    ``views(video)`` always returns ``[V, T, D]`` float32 (V = 1 for
    ``mean``), reading only that video's memory map.
    """

    def __init__(self, root: str | Path, crops: str = "mean"):
        self.root = Path(root)
        if crops not in CROP_MODES:
            raise WsadError(f"data.crops={crops!r} is not known; use one of {list(CROP_MODES)}")
        self.crops = crops
        if not (self.root / "store.json").is_file():
            raise WsadError(f"{self.root} is not a feature store (no store.json); "
                            "make one with wsad-synth or wsad-index")
        try:
            self.meta = json.loads((self.root / "store.json").read_text())
        except (OSError, ValueError) as err:
            raise WsadError(f"{self.root}/store.json is unreadable ({err}); "
                            "run wsad-check for details") from None
        self.dim = int(self.meta["dim"])
        self.segment_frames = int(self.meta.get("segment_frames", SEGMENT_FRAMES))
        #: frames per second of the source footage, or None when store.json does not say
        self.fps = float(self.meta["fps"]) if self.meta.get("fps") is not None else None
        self.manifest = pd.read_csv(self.root / "manifest.csv", dtype={"video": str, "group": str,
                                                                       "file": str, "split": str})
        ev_path = self.root / "events.csv"
        if ev_path.is_file():
            self.events = pd.read_csv(ev_path, dtype={"video": str})
        else:
            self.events = pd.DataFrame(columns=EVENT_COLUMNS)
        self._rows = {v: i for i, v in enumerate(self.manifest["video"])}
        # plain dicts: looked up per video in every epoch, so no pandas indexing there
        self._label = dict(zip(self.manifest["video"], self.manifest["label"].astype(int)))
        self._frames = dict(zip(self.manifest["video"], self.manifest["frames"].astype(int)))
        self._file = dict(zip(self.manifest["video"], self.manifest["file"]))
        self._group = dict(zip(self.manifest["video"], self.manifest["group"]))
        self._spans: dict[str, list[tuple[int, int]]] = {}
        for v, s, e in zip(self.events["video"], self.events["start"], self.events["end"]):
            self._spans.setdefault(v, []).append((int(s), int(e)))
        self._n_seg: dict[str, int] = {}
        self._maps: dict[tuple[str, str], np.ndarray] = {}   # (video, mmap mode) -> open map
        self._n_views: dict[str, int] = {}

    # -- manifest helpers -------------------------------------------------
    def videos(self, split: str | None = None) -> list[str]:
        m = self.manifest if split is None else self.manifest[self.manifest["split"] == split]
        return list(m["video"])

    def row(self, video: str) -> pd.Series:
        return self.manifest.iloc[self._rows[video]]

    def label(self, video: str) -> int:
        return int(self._label[video])

    def frames(self, video: str) -> int:
        return int(self._frames[video])

    def group(self, video: str) -> str:
        return str(self._group[video])

    # -- arrays -----------------------------------------------------------
    def raw(self, video: str) -> np.ndarray:
        """The video's array as stored (memory map; float16 or float32).

        Maps are kept open: opening one costs a header parse and a system call,
        which a batch of 32 windows would otherwise pay 32 times. Their pages
        belong to the operating system's file cache, not to the process."""
        return self._map(video, "r")

    def _map(self, video: str, mode: str) -> np.ndarray:
        arr = self._maps.get((video, mode))
        if arr is None:
            arr = self._maps[video, mode] = np.load(self.root / self._file[video], mmap_mode=mode)
        return arr

    def _shape(self, video: str) -> None:
        arr = self.raw(video)
        self._n_seg[video] = int(arr.shape[-2])
        self._n_views[video] = 1 if (arr.ndim == 2 or self.crops == "mean") else int(arr.shape[0])

    def n_segments(self, video: str) -> int:
        if video not in self._n_seg:
            self._shape(video)
        return self._n_seg[video]

    def views(self, video: str) -> np.ndarray:
        """``[V, T, D]`` float32 views of one video (see class docstring)."""
        arr = self.raw(video)
        if arr.ndim == 2 or self.crops == "mean":
            return np.asarray(self.view(video), dtype=np.float32)[None]
        return np.asarray(arr, dtype=np.float32)

    def view(self, video: str, k: int = 0, rows: slice = slice(None)) -> np.ndarray:
        """Segments ``rows`` of view ``k`` of one video as ``[T, D]``, as stored where it can be
        (a float16 or float32 memory map; slice it before converting), or the float32 mean over
        crops in ``mean`` mode (only the rows asked for are read)."""
        arr = self.raw(video)
        if arr.ndim == 2:
            return arr[rows]
        if self.crops == "mean":
            return crop_mean(self._private(video)[:, rows])
        return arr[k, rows]

    def _private(self, video: str) -> np.ndarray:
        """The video's array as a copy-on-write map: the same pages, but writable as far as
        torch can tell, so it wraps the map without a copy or a warning; a write would change
        this process's pages only, never the file."""
        return self._map(video, "c")

    def n_views(self, video: str) -> int:
        if video not in self._n_views:
            self._shape(video)
        return self._n_views[video]

    # -- ground truth -----------------------------------------------------
    def frame_labels(self, video: str) -> np.ndarray | None:
        """0/1 per frame from events.csv, or None for an anomalous video
        without events (frame-level metrics then skip it)."""
        n = self.frames(video)
        lab = np.zeros(n, dtype=np.int8)
        spans = self._spans.get(video, [])
        if self.label(video) == 1 and not spans:
            return None
        for s, e in spans:
            lab[s:e] = 1
        return lab
