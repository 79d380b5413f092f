"""A folder of videos -> features, one video at a time: atomic per-video writes, a rerun skips
what is done, a video that cannot be decoded is named and skipped, shards split the sorted list.

Without labels, ``OUT/<video>.npy`` per video and ``OUT/labels_template.csv`` (video, label,
split, group, frames; label and split for the user to fill) for ``wsad-index``; with a labels
CSV, a ready store in ``OUT`` (features/, manifest.csv, store.json[, events.csv]) once every
labelled video is extracted. ``OUT/.extract/<video>.json`` records how each array was made."""
from __future__ import annotations

import json
import warnings
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np
import pandas as pd
from tqdm.auto import tqdm

from ..errors import WsadError
from ..files import atomic_path
from .backbones import FEATURE_DIM, VideoResNet
from .decode import VideoError, find_videos
from .pipeline import extract_video

TEMPLATE = "labels_template.csv"


@dataclass
class Settings:
    """What makes two arrays comparable: a rerun with other settings refuses to mix them."""

    backbone: str
    weights: str
    crops: int
    fps: float | None

    def as_dict(self) -> dict:
        return {"backbone": self.backbone, "weights": self.weights, "crops": self.crops, "fps": self.fps}


@dataclass
class Outcome:
    done: list[str] = field(default_factory=list)      # extracted by this run
    skipped: list[str] = field(default_factory=list)   # already there
    failed: dict[str, str] = field(default_factory=dict)
    store: Path | None = None
    waiting: int = 0                                   # labelled videos not extracted yet


def parse_shard(text: str | None) -> tuple[int, int]:
    """``"i/n"`` (0 <= i < n) -> (i, n); None -> the whole list."""
    if text is None:
        return 0, 1
    try:
        i, n = (int(x) for x in str(text).split("/"))
    except ValueError:
        raise WsadError(f"--shard {text}: give i/n with 0 <= i < n, e.g. 0/4") from None
    if not 0 <= i < n:
        raise WsadError(f"--shard {text}: give i/n with 0 <= i < n, e.g. 0/4")
    return i, n


def plan(videos_root: Path, shard: tuple[int, int]) -> list[tuple[str, Path, str]]:
    """(video name, file, group) of this shard: every n-th of the sorted list from i."""
    files = find_videos(videos_root)
    base = videos_root if videos_root.is_dir() else videos_root.parent
    seen: dict[str, Path] = {}
    out = []
    for f in files:
        name = f.stem
        if name in seen:
            raise WsadError(f"two videos named {name!r}: {seen[name]} and {f}; a video's name is its file "
                            "name without extension, so rename one")
        seen[name] = f
        rel = f.relative_to(base).parts
        out.append((name, f, rel[0] if len(rel) > 1 else name))
    i, n = shard
    return out[i::n]


def _meta_path(out: Path, video: str) -> Path:
    return out / ".extract" / f"{video}.json"


def _array_path(out: Path, video: str, labelled: bool) -> Path:
    return out / "features" / f"{video}.npy" if labelled else out / f"{video}.npy"


def _done(out: Path, video: str, labelled: bool, settings: Settings) -> bool:
    meta = _meta_path(out, video)
    if not (meta.is_file() and _array_path(out, video, labelled).is_file()):
        return False
    made = json.loads(meta.read_text())
    if {k: made.get(k) for k in settings.as_dict()} != settings.as_dict():
        raise WsadError(f"{out} holds {video} made with {made['backbone']}, weights {made['weights']}, "
                        f"crops {made['crops']}, fps {made['fps']}; this run asks for {settings.as_dict()}: "
                        "use another --out (features of different settings never mix)")
    return True


def extract_folder(videos_root: str | Path, out: str | Path, model: VideoResNet, settings: Settings,
                   batch: int = 8, shard: tuple[int, int] = (0, 1), labels: str | Path | None = None,
                   events: str | Path | None = None, progress: bool = True) -> Outcome:
    """Extract this shard's videos into ``out`` (see the module docstring)."""
    videos_root, out = Path(videos_root), Path(out)
    todo = plan(videos_root, shard)
    labelled = labels is not None
    wanted = _read_labels(labels) if labelled else None
    if wanted is not None:
        todo = [t for t in todo if t[0] in set(wanted.video)]
    result = Outcome()
    for video, path, group in tqdm(todo, desc="extract", unit="video", disable=not progress):
        if _done(out, video, labelled, settings):
            result.skipped.append(video)
            continue
        try:
            got = extract_video(path, model, settings.crops, batch, settings.fps)
        except VideoError as err:
            result.failed[video] = str(err)
            tqdm.write(f"wsad-extract: skipped {err}")
            continue
        with atomic_path(_array_path(out, video, labelled)) as tmp:
            np.save(tmp, got.features)
        with atomic_path(_meta_path(out, video)) as tmp:   # written last: it marks the video done
            tmp.write_text(json.dumps({**settings.as_dict(), "source": str(path), "group": group,
                                       "frames": got.frames, "source_fps": got.fps,
                                       "segments": int(got.features.shape[-2])}, indent=1))
        result.done.append(video)
    made = _made(out)
    if wanted is None:
        _write_template(out, made)
    else:
        result.store, result.waiting = _maybe_store(out, wanted, made, settings, events)
    return result


def _made(out: Path) -> pd.DataFrame:
    rows = [{"video": p.stem, **json.loads(p.read_text())} for p in sorted((out / ".extract").glob("*.json"))]
    return pd.DataFrame(rows) if rows else pd.DataFrame(columns=["video", "group", "frames", "source_fps", "source"])


def _write_template(out: Path, made: pd.DataFrame) -> None:
    if not len(made):
        return
    t = pd.DataFrame({"video": made.video, "label": "", "split": "", "group": made.group, "frames": made.frames})
    with atomic_path(out / TEMPLATE) as tmp:
        t.to_csv(tmp, index=False)


def _read_labels(labels) -> pd.DataFrame:
    try:
        t = pd.read_csv(labels, dtype=str, keep_default_na=False)
    except (OSError, ValueError, pd.errors.ParserError) as err:
        raise WsadError(f"--labels {labels} is unreadable ({str(err).splitlines()[0]})") from None
    missing = [c for c in ("video", "label", "split") if c not in t.columns]
    if missing:
        raise WsadError(f"--labels {labels} lacks column(s) {missing}; need video,label,split[,group]")
    return t


def _fps_of(made: pd.DataFrame, settings: Settings) -> float | None:
    if settings.fps:
        return float(settings.fps)
    rates = set(made.source_fps.dropna().round(6))
    if len(rates) == 1:
        return float(rates.pop())
    warnings.warn(f"the videos have {len(rates)} different frame rates {sorted(rates)[:4]}: store.json gets no "
                  "fps (alarm metrics need one); rerun with --fps N into a new folder to resample them all",
                  stacklevel=2)
    return None


def _maybe_store(out: Path, wanted: pd.DataFrame, made: pd.DataFrame, settings: Settings, events) -> tuple:
    """Write the store files once every labelled video has its features."""
    from ..store import check_store
    from ..store.atomic import write_store_json
    from ..store.format import MANIFEST_COLUMNS, SEGMENT_FRAMES

    have = made.set_index("video")
    missing = [v for v in wanted.video if v not in have.index]
    if missing:
        return None, len(missing)
    groups = wanted["group"] if "group" in wanted.columns else pd.Series([""] * len(wanted))
    man = pd.DataFrame({"video": wanted.video, "file": [f"features/{v}.npy" for v in wanted.video],
                        "label": wanted.label, "split": wanted.split,
                        "group": [g or have.loc[v, "group"] for v, g in zip(wanted.video, groups)],
                        "frames": [int(have.loc[v, "frames"]) for v in wanted.video]}, columns=MANIFEST_COLUMNS)
    with atomic_path(out / "manifest.csv") as tmp:
        man.to_csv(tmp, index=False)
    if events is not None:
        with atomic_path(out / "events.csv") as tmp:
            _read_events(events).to_csv(tmp, index=False)
    fps = _fps_of(made[made.video.isin(wanted.video)], settings)
    extra = {"fps": fps} if fps else {}
    write_store_json(out, FEATURE_DIM, SEGMENT_FRAMES, f"extracted with {settings.backbone} "
                     f"(weights {settings.weights}, {settings.crops} crop(s))", **extra)
    errors = [p for p in check_store(out) if p.severity == "error"]
    if errors:
        for name in ("manifest.csv", "store.json"):
            (out / name).unlink(missing_ok=True)
        raise WsadError(f"the store in {out} would have {len(errors)} problem(s), first: {errors[0]}; "
                        "fix --labels and rerun (the features are kept)")
    return out, 0


def _read_events(events) -> pd.DataFrame:
    try:
        return pd.read_csv(events, dtype=str, keep_default_na=False)
    except (OSError, ValueError, pd.errors.ParserError) as err:
        raise WsadError(f"--events {events} is unreadable ({str(err).splitlines()[0]})") from None
