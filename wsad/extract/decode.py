"""Decoding video files into 16-frame clips with PyAV, a segment at a time.

The store's segment convention, exactly: segment t covers frames [16 t, 16 t + 16); a video of n
frames has T = max(1, floor(n / 16)) segments, the last one also covering the tail (n mod 16
frames, which take no part in its clip); a video shorter than 16 frames is padded by repeating
its last frame. Frames are decoded in order and never all held at once.

With ``fps`` the footage is resampled to that rate by timestamps: output frame k shows the
latest decoded frame whose time is <= k / fps, for k = 0 .. floor(t_last fps), t_last the time
of the last decoded frame (exact rational arithmetic), so variable-frame-rate footage gets
evenly spaced frames."""
from __future__ import annotations

from collections.abc import Iterator
from fractions import Fraction
from pathlib import Path

import numpy as np

from ..errors import WsadError
from .backbones import CLIP_FRAMES

VIDEO_SUFFIXES = (".mp4", ".avi", ".mkv", ".mov", ".webm", ".mpg", ".mpeg", ".m4v", ".ts", ".wmv", ".flv")


class VideoError(WsadError):
    """A video that cannot be used (named in the message); the other videos go on."""


def _open(path: Path):
    import av

    try:
        container = av.open(str(path))
    except (av.error.FFmpegError, OSError, UnicodeDecodeError) as err:
        raise VideoError(f"{path.name}: cannot open ({type(err).__name__}: {err})") from None
    if not container.streams.video:
        container.close()
        raise VideoError(f"{path.name}: no video stream")
    return container


def source_fps(path: Path) -> float | None:
    """The declared average frame rate of the first video stream (None when unknown)."""
    with _open(path) as c:
        rate = c.streams.video[0].average_rate or c.streams.video[0].guessed_rate
        return float(rate) if rate else None


class FrameReader:
    """Iterates a video's RGB frames (``[H, W, 3]`` uint8) in order, resampled to ``fps`` when
    given; after iteration ``count`` is the number of frames given out and ``fps`` the rate."""

    def __init__(self, path: str | Path, fps: float | None = None):
        self.path, self.target = Path(path), fps
        self.count, self.fps = 0, None

    def __iter__(self) -> Iterator[np.ndarray]:
        import av

        with _open(self.path) as container:
            stream = container.streams.video[0]
            stream.thread_type = "AUTO"
            declared = stream.average_rate or stream.guessed_rate
            self.fps = float(self.target) if self.target else (float(declared) if declared else None)
            step = Fraction(self.target).limit_denominator(1_000_000) if self.target else None
            held, t_last, k = None, None, 0
            try:
                for frame in container.decode(stream):
                    image = frame.to_ndarray(format="rgb24")
                    if step is None:
                        self.count += 1
                        yield image
                        continue
                    t = Fraction(frame.pts or 0) * stream.time_base if frame.pts is not None else (
                        Fraction(self.count) / step)
                    while held is not None and Fraction(k) / step < t:  # outputs before this frame
                        self.count += 1
                        k += 1
                        yield held
                    held, t_last = image, t
            except av.error.FFmpegError as err:
                raise VideoError(f"{self.path.name}: corrupt after {self.count} frames ({err})") from None
            if step is not None and held is not None:
                while Fraction(k) / step <= t_last:
                    self.count += 1
                    k += 1
                    yield held
            self._check_complete(container, stream)
        if self.count == 0:
            raise VideoError(f"{self.path.name}: no frame could be decoded")

    def _check_complete(self, container, stream) -> None:
        """A file cut short keeps its header: fewer seconds decoded than declared means truncated."""
        declared = None
        if stream.duration is not None and stream.time_base is not None:
            declared = float(stream.duration * stream.time_base)
        elif container.duration is not None:
            declared = container.duration / 1_000_000
        if declared and self.fps and self.count and self.count / self.fps < 0.9 * declared - 1.0:
            raise VideoError(f"{self.path.name}: truncated (decoded {self.count / self.fps:.1f} s of "
                             f"{declared:.1f} s declared)")


class ClipReader:
    """The clips of a video's segments, ``[16, H, W, 3]`` uint8 each (see the module docstring);
    ``frames`` (after iteration) is the decoded frame count that goes to the manifest."""

    def __init__(self, path: str | Path, fps: float | None = None):
        self.frames_in = FrameReader(path, fps)

    @property
    def frames(self) -> int:
        return self.frames_in.count

    @property
    def fps(self) -> float | None:
        return self.frames_in.fps

    def __iter__(self) -> Iterator[np.ndarray]:
        buf: list[np.ndarray] = []
        emitted = 0
        for image in self.frames_in:
            buf.append(image)
            if len(buf) == CLIP_FRAMES:
                emitted += 1
                yield np.stack(buf)
                buf = []
        if emitted == 0 and buf:   # shorter than one segment: repeat the last frame
            yield np.stack(buf + [buf[-1]] * (CLIP_FRAMES - len(buf)))
        # otherwise the tail (< 16 frames) is folded into the last segment: no clip of its own


def find_videos(root: str | Path) -> list[Path]:
    """Video files under ``root`` (or ``root`` itself), sorted by path: the order shards split."""
    root = Path(root)
    if root.is_file():
        return [root]
    if not root.is_dir():
        raise WsadError(f"VIDEOS {root}: no such file or folder")
    found = sorted(p for p in root.rglob("*") if p.is_file() and p.suffix.lower() in VIDEO_SUFFIXES)
    if not found:
        raise WsadError(f"VIDEOS {root}: no video files ({', '.join(VIDEO_SUFFIXES)})")
    return found
