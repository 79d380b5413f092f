"""wsad-extract on the CPU: does decoding hide behind the backbone, and is memory independent of
the video's length?

- ``extract.ratio_to_forward``: wall time per segment of the whole pipeline (decode, resize,
  crop, forward, write) / the backbone's forward alone on the same clips, decoded and prepared
  beforehand; r3d_18, one crop, batch 8, random weights (the same arithmetic as the published
  ones). Goal <= 1.3.
- ``extract.peak_rss_ratio``: peak anonymous RSS (sampled every 20 ms, each in a fresh process)
  extracting a 10-minute video / a 1-minute one. The footage is 320 x 240 H.264 at
  ``FPS[size]`` frames per second (4 in ``quick``, so 10 minutes are 150 segments); goal <= 1.1.
- ``extract.segments_per_s``: the pipeline's throughput, and ``forward_segments_per_s`` per
  backbone (batch 8, 16 x 112 x 112 clips).

    python benchmarks/extract.py [tiny|quick|full]
"""
from __future__ import annotations

import json
import os
import subprocess
import sys
import tempfile
import time
import warnings
from pathlib import Path

import numpy as np
from _common import WORK, PeakAnon, anon_rss_gb, emit, size_arg

FPS = {"tiny": 4, "quick": 4, "full": 25}
RATIO_SEGMENTS = {"tiny": 4, "quick": 24, "full": 64}
PER_BACKBONE = {"tiny": 2, "quick": 8, "full": 16}


def footage(path: Path, seconds: float, fps: int) -> Path:
    """Camera-like footage: a drifting gradient with noise, H.264, 320 x 240."""
    import av

    if path.is_file():
        return path
    path.parent.mkdir(parents=True, exist_ok=True)
    rng = np.random.default_rng(0)
    yy, xx = np.mgrid[0:240, 0:320]
    tmp = path.with_suffix(".part.mp4")
    with av.open(str(tmp), "w") as c:
        s = c.add_stream("libx264", rate=fps)
        s.width, s.height, s.pix_fmt = 320, 240, "yuv420p"
        for i in range(int(seconds * fps)):
            base = ((xx + 2 * i) % 256 + (yy // 2)) % 256
            img = np.clip(base[..., None] + rng.normal(0, 12, (240, 320, 1)), 0, 255).astype(np.uint8)
            frame = av.VideoFrame.from_ndarray(np.repeat(img, 3, -1), format="rgb24")
            for p in s.encode(frame):
                c.mux(p)
        for p in s.encode():
            c.mux(p)
    tmp.replace(path)
    return path


def _model(name: str = "r3d_18"):
    import torch

    from wsad.extract.backbones import build_backbone
    from wsad.extract.pipeline import steady_memory

    steady_memory()   # as wsad-extract does
    torch.set_num_threads(os.cpu_count() or 1)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        return build_backbone(name, "none")


def ratio(size: str) -> dict:
    import torch

    from wsad.extract.decode import ClipReader
    from wsad.extract.pipeline import extract_video
    from wsad.extract.preprocess import prepare_clip

    fps = 25
    video = footage(WORK / "extract" / f"ratio_{size}.mp4", RATIO_SEGMENTS[size] * 16 / fps, fps)
    model = _model()
    clips = [prepare_clip(c) for c in ClipReader(video)]
    with torch.no_grad():
        model.features(torch.cat(clips[:8]))   # warm-up
        t = time.perf_counter()
        for i in range(0, len(clips), 8):
            model.features(torch.cat(clips[i:i + 8]))
        forward = time.perf_counter() - t
    with tempfile.TemporaryDirectory() as tmp:
        t = time.perf_counter()
        got = extract_video(video, model, batch=8)
        np.save(Path(tmp) / "v.npy", got.features)
        whole = time.perf_counter() - t
    n = len(clips)
    return {"ratio_to_forward": whole / forward, "segments": n, "segments_per_s": n / whole,
            "forward_only_segments_per_s": n / forward}


def per_backbone(size: str) -> dict:
    import torch

    from wsad.extract.backbones import BACKBONES

    out = {}
    x = torch.randn(8, 3, 16, 112, 112)
    for name in BACKBONES:
        model = _model(name)
        with torch.no_grad():
            model.features(x[:2])
            t = time.perf_counter()
            for _ in range(max(1, PER_BACKBONE[size] // 8)):
                model.features(x[:min(8, PER_BACKBONE[size])])
            dt = time.perf_counter() - t
        out[name] = max(1, PER_BACKBONE[size] // 8) * min(8, PER_BACKBONE[size]) / dt
    return out


def child(video: str) -> dict:
    from wsad.extract.pipeline import extract_video

    before = anon_rss_gb()
    model = _model()
    with PeakAnon() as peak:
        got = extract_video(video, model, batch=8)
    return {"peak_anon_rss_gb": peak.peak, "interpreter_gb": before, "segments": int(got.features.shape[0])}


def rss(size: str) -> dict:
    fps = FPS[size]
    # both past the first full batch (8 segments), where the peak is reached
    minutes = {"short": 1, "long": 10} if size != "tiny" else {"short": 0.6, "long": 0.8}
    res = {}
    for key, m in minutes.items():
        video = footage(WORK / "extract" / f"{key}_{size}_{fps}fps.mp4", 60 * m, fps)
        proc = subprocess.run([sys.executable, __file__, "--child", str(video)], capture_output=True,
                              text=True, check=True)
        res[key] = json.loads(proc.stdout.strip().splitlines()[-1])
    return {"peak_rss_ratio": res["long"]["peak_anon_rss_gb"] / res["short"]["peak_anon_rss_gb"],
            "peak_rss_gb": {k: v["peak_anon_rss_gb"] for k, v in res.items()},
            "rss_segments": {k: v["segments"] for k, v in res.items()}, "rss_minutes": minutes, "rss_fps": fps}


if __name__ == "__main__":
    if len(sys.argv) > 2 and sys.argv[1] == "--child":
        print(json.dumps(child(sys.argv[2])))
    else:
        size = size_arg()
        emit({"extract": {**ratio(size), **rss(size), "forward_segments_per_s": per_backbone(size)}})
