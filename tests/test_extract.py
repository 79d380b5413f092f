"""wsad-extract: frame-exact decoding (videos encoded here, losslessly, each frame's pixels holding
its index), crops by hand-computed boxes, the backbones against torchvision's own model code
(loaded without importing torchvision), failures, resume and shards. No download anywhere."""
from __future__ import annotations

import fractions
import json
import os
import pickle
import subprocess
import sys
import time
import warnings
from pathlib import Path

import numpy as np
import pandas as pd
import pytest
import torch

av = pytest.importorskip("av")

from torchvision_reference import reference_video_resnets  # noqa: E402

from wsad.errors import WsadError  # noqa: E402
from wsad.extract.backbones import BACKBONES, build_backbone, load_state_file  # noqa: E402
from wsad.extract.decode import ClipReader, FrameReader  # noqa: E402
from wsad.extract.folder import Settings, extract_folder, parse_shard  # noqa: E402
from wsad.extract.pipeline import extract_video  # noqa: E402
from wsad.extract.preprocess import crop_boxes, prepare_clip  # noqa: E402


def encode(path: Path, n: int, size=(48, 64), fps: int = 25, pts_ms: list[int] | None = None) -> Path:
    """A lossless (FFV1, RGB) video whose frame i has red = i % 256, green = i // 256."""
    path.parent.mkdir(parents=True, exist_ok=True)
    with av.open(str(path), "w") as c:
        s = c.add_stream("ffv1", rate=fps)
        s.width, s.height, s.pix_fmt = size[1], size[0], "bgr0"
        if pts_ms is not None:
            s.codec_context.time_base = fractions.Fraction(1, 1000)
        for i in range(n):
            a = np.zeros((*size, 3), np.uint8)
            a[..., 0], a[..., 1], a[..., 2] = i % 256, i // 256, 7
            f = av.VideoFrame.from_ndarray(a, format="rgb24")
            if pts_ms is not None:
                f.pts, f.time_base = pts_ms[i], fractions.Fraction(1, 1000)
            for p in s.encode(f):
                c.mux(p)
        for p in s.encode():
            c.mux(p)
    return path


def index_of(frame: np.ndarray) -> int:
    return int(frame[0, 0, 0]) + 256 * int(frame[0, 0, 1])


@pytest.mark.parametrize("n", [5, 16, 37, 48, 300])
def test_clips_follow_the_segment_convention_frame_by_frame(tmp_path, n):
    reader = ClipReader(encode(tmp_path / "v.mkv", n))
    clips = [[index_of(f) for f in clip] for clip in reader]
    assert reader.frames == n                              # the manifest's frames: every decoded frame
    if n < 16:                                             # padded by repeating the last frame
        assert clips == [list(range(n)) + [n - 1] * (16 - n)]
    else:                                                  # T = floor(n / 16); the tail folds into the last
        assert clips == [list(range(16 * t, 16 * t + 16)) for t in range(n // 16)]


def test_resampling_by_timestamps_and_variable_frame_rate(tmp_path):
    r = FrameReader(encode(tmp_path / "c.mkv", 100), fps=10)
    # frame i is shown at i / 25 s; output k at k / 10 s takes the latest frame i <= 2.5 k
    assert [index_of(f) for f in r] == [int(2.5 * k) for k in range(40)] and r.fps == 10.0
    vfr = encode(tmp_path / "vfr.mkv", 6, pts_ms=[0, 40, 50, 200, 210, 400])
    assert [index_of(f) for f in FrameReader(vfr)] == list(range(6))            # as decoded
    # at 10 fps: 0 s -> frame 0, 0.1 s -> frame 2 (50 ms), 0.2 -> 3, 0.3 -> 4 (210 ms), 0.4 -> 5
    assert [index_of(f) for f in FrameReader(vfr, fps=10)] == [0, 2, 3, 4, 5]


def test_crop_boxes_by_hand():
    # 128 x 171 frames, 112 crops: centre at row round(16 / 2) = 8, column round(59 / 2) = 30
    # (half to even); corners at rows 0 / 16 and columns 0 / 59
    assert crop_boxes(128, 171, 112, 1) == [(8, 30, False)]
    five = [(0, 0, False), (0, 59, False), (16, 0, False), (16, 59, False), (8, 30, False)]
    assert crop_boxes(128, 171, 112, 5) == five
    assert crop_boxes(128, 171, 112, 10) == five + [(t, c, True) for t, c, _ in five]
    # frames already 128 x 171 whose pixels hold their (row, column): each view's first pixel
    rows, cols = np.meshgrid(np.arange(128), np.arange(171), indexing="ij")
    frame = np.stack([np.zeros_like(rows), rows, cols], -1).astype(np.uint8)
    x = prepare_clip(np.repeat(frame[None], 16, 0), crops=10)
    assert x.shape == (10, 3, 16, 112, 112)
    mean, std = (torch.tensor(v) for v in torchvision_video_normalisation())   # torchvision's preset
    pixels = ((x[:, :, 0, 0, 0] * std + mean) * 255).round().int()   # [view, channel]
    for view, (top, left, flipped) in enumerate(five + [(t, c, True) for t, c, _ in five]):
        assert pixels[view, 1] == top and pixels[view, 2] == (left + 111 if flipped else left)


def torchvision_video_normalisation() -> tuple[list[float], list[float]]:
    """The mean and std of torchvision's VideoClassification preset (the transforms of its video
    weights), read from the installed wheel's source: ``import torchvision`` fails beside the CPU
    torch, so the file is parsed, not imported."""
    import ast
    import importlib.util

    spec = importlib.util.find_spec("torchvision")
    path = Path(spec.submodule_search_locations[0]) / "transforms" / "_presets.py"
    tree = ast.parse(path.read_text())
    cls = next(n for n in tree.body if isinstance(n, ast.ClassDef) and n.name == "VideoClassification")
    init = next(n for n in cls.body if isinstance(n, ast.FunctionDef) and n.name == "__init__")
    defaults = {a.arg: ast.literal_eval(d) for a, d in zip(init.args.kwonlyargs, init.args.kw_defaults)
                if a.arg in ("mean", "std")}
    return list(defaults["mean"]), list(defaults["std"])


def test_parameter_counts_match_the_published_ones():
    # torchvision's model docs (num_params of the Kinetics-400 weights)
    published = {"r3d_18": 33_371_472, "mc3_18": 11_695_440, "r2plus1d_18": 31_505_325}
    assert {n: sum(p.numel() for p in f().parameters()) for n, f in BACKBONES.items()} == published


@pytest.mark.parametrize("name", list(BACKBONES))
def test_features_equal_the_reference_forward(name):
    # reference: torchvision's models/video/resnet.py, same random weights, same input tensor
    rng = np.random.default_rng(0)
    clip = rng.integers(0, 256, (16, 90, 120, 3), dtype=np.uint8)
    x = prepare_clip(clip, crops=1)                                 # [1, 3, 16, 112, 112]
    with reference_video_resnets() as tv:
        ref = getattr(tv, name)().eval()
    mine = BACKBONES[name]().eval()
    assert list(mine.state_dict()) == list(ref.state_dict())        # the published files' layout
    mine.load_state_dict(ref.state_dict())
    with torch.no_grad():
        r = ref.stem(x)
        for i in range(1, 5):
            r = getattr(ref, f"layer{i}")(r)
        assert torch.allclose(mine.features(x), ref.avgpool(r).flatten(1), atol=1e-6)
        assert torch.allclose(mine(x), ref(x), atol=1e-6)


def test_pipeline_equals_the_model_on_each_clip_in_any_batch(tmp_path):
    path = encode(tmp_path / "v.mkv", 16 * 3 + 3)
    model = _random("mc3_18")
    clips = [prepare_clip(c) for c in ClipReader(path)]
    with torch.no_grad():
        direct = torch.cat([model.features(c) for c in clips]).numpy()
    for batch in (2, 8):   # a partial last batch, and all in one
        got = extract_video(path, model, batch=batch)
        assert got.features.shape == (3, 512) and got.frames == 51 and got.fps == 25.0
        assert np.allclose(got.features, direct, atol=1e-5)
    five = extract_video(encode(tmp_path / "short.mkv", 20), model, crops=5)
    assert five.features.shape == (5, 1, 512) and five.frames == 20


def _random(name: str):
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        return build_backbone(name, "none")


def test_weights_files(tmp_path):
    with pytest.warns(UserWarning, match="features mean nothing"):
        a = build_backbone("mc3_18", "none")
    b = _random("mc3_18")                      # the same random network in every process
    assert all(torch.equal(a.state_dict()[k], b.state_dict()[k]) for k in a.state_dict())
    torch.save(a.state_dict(), tmp_path / "w.pt")
    c = build_backbone("mc3_18", str(tmp_path / "w.pt"))
    assert all(torch.equal(a.state_dict()[k], c.state_dict()[k]) for k in a.state_dict())

    class Payload:               # what a crafted file would smuggle in: code run at load time
        def __reduce__(self):
            return (os.system, ("echo crafted",))

    with open(tmp_path / "bad.pt", "wb") as f:
        pickle.dump({"conv": Payload()}, f)
    with pytest.raises(WsadError, match="refused to load .*weights_only=True"):
        load_state_file(tmp_path / "bad.pt")
    with pytest.raises(WsadError, match="no such file"):
        build_backbone("mc3_18", str(tmp_path / "absent.pt"))
    with pytest.raises(WsadError, match="unknown; known: r3d_18, mc3_18, r2plus1d_18"):
        build_backbone("resnet50", "none")


def _bad_videos(folder: Path) -> None:
    (folder / "junk.mp4").write_bytes(np.random.default_rng(0).bytes(4000))
    with av.open(str(folder / "sound.mkv"), "w") as c:      # audio only
        s = c.add_stream("pcm_s16le", rate=8000)
        fr = av.AudioFrame.from_ndarray(np.zeros((1, 800), np.int16), format="s16", layout="mono")
        fr.rate = 8000
        for p in [*s.encode(fr), *s.encode()]:
            c.mux(p)
    full = encode(folder / "full.mkv", 200).read_bytes()
    (folder / "full.mkv").unlink()
    (folder / "cut.mkv").write_bytes(full[: len(full) // 2])   # truncated: header says 8 s


def test_bad_videos_are_named_and_the_others_go_on(tmp_path):
    videos = tmp_path / "videos"
    encode(videos / "good.mkv", 40)
    _bad_videos(videos)
    out = extract_folder(videos, tmp_path / "out", _random("mc3_18"), Settings("mc3_18", "none", 1, None),
                         progress=False)
    assert out.done == ["good"]
    assert set(out.failed) == {"junk", "sound", "cut"}
    assert "cannot open" in out.failed["junk"] and "no video stream" in out.failed["sound"]
    assert "truncated" in out.failed["cut"]
    res = _cli(tmp_path, str(videos), "--out", str(tmp_path / "out"), "--weights", "none",
               "--backbone", "mc3_18", "--quiet")
    assert res.returncode == 2 and "1 already done, 3 failed" in res.stdout
    assert "sound.mkv: no video stream" in res.stderr and "Traceback" not in res.stderr


def _cli(cwd: Path, *args, **kw):
    code = "import sys; from wsad.cli.extract import main; sys.argv=['wsad-extract']+sys.argv[1:]; main()"
    return subprocess.run([sys.executable, "-c", code, *args], capture_output=True, text=True, cwd=cwd,
                          timeout=600, **kw)


def _camera_folder(root: Path) -> dict[str, int]:
    lengths = {"cam1/a": 20, "cam1/b": 33, "cam2/c": 17, "cam2/d": 16, "cam3/e": 41, "cam3/f": 15,
               "cam4/g": 32, "cam4/h": 10}   # 1-2 segments each, two shorter than one
    for name, n in lengths.items():
        encode(root / f"{name}.mkv", n)
    return {k.split("/")[1]: v for k, v in lengths.items()}


def test_folder_to_a_checked_store_that_trains(tmp_path):
    videos = tmp_path / "videos"
    lengths = _camera_folder(videos)
    res = _cli(tmp_path, str(videos), "--out", str(tmp_path / "feat"), "--weights", "none",
               "--backbone", "mc3_18", "--quiet")
    assert res.returncode == 0, res.stderr[-2000:]
    template = pd.read_csv(tmp_path / "feat" / "labels_template.csv")
    assert dict(zip(template.video, template.frames)) == lengths
    assert dict(zip(template.video, template.group))["c"] == "cam2"
    for v, n in lengths.items():                     # T = max(1, floor(frames / 16)) rows each
        assert np.load(tmp_path / "feat" / f"{v}.npy").shape == (max(1, n // 16), 512)
    labels = template.assign(label=[1, 0, 1, 0, 1, 0, 1, 0],
                             split=["train"] * 4 + ["test"] * 4)[["video", "label", "split"]]
    labels.to_csv(tmp_path / "labels.csv", index=False)
    pd.DataFrame({"video": ["e", "g"], "start": [16, 20], "end": [40, 30]}).to_csv(tmp_path / "events.csv",
                                                                                  index=False)
    res = _cli(tmp_path, str(videos), "--out", str(tmp_path / "store"), "--weights", "none", "--backbone",
               "mc3_18", "--fps", "25", "--labels", str(tmp_path / "labels.csv"), "--events",
               str(tmp_path / "events.csv"), "--quiet")
    assert res.returncode == 0 and "store ready" in res.stdout, res.stderr[-2000:]
    check = subprocess.run([sys.executable, "-m", "wsad.cli.check", str(tmp_path / "store"), "--strict"],
                           capture_output=True, text=True)
    assert check.returncode == 0, check.stdout + check.stderr
    meta = json.loads((tmp_path / "store" / "store.json").read_text())
    assert meta["dim"] == 512 and meta["fps"] == 25.0 and meta["segment_frames"] == 16
    from wsad.config import compose_config
    from wsad.train import train

    r = train(compose_config([f"data.root={tmp_path / 'store'}", "trainer.members=1", "recipe=topk", "trainer.epochs=2",
                              "trainer.progress=false", "tracking.enabled=false", "trainer.bootstrap=0",
                              "trainer.select=last", "trainer.weak_val_share=0", f"trainer.out_dir={tmp_path}/run"]))
    # random weights: the features mean nothing, so no learning is asked for; what is checked is
    # that the extracted store trains end to end and is scored frame by frame against its events
    scores = pd.read_parquet(tmp_path / "run" / "scores" / "test_scores.parquet")
    assert len(r.history) == 2 and set(scores.video) == set(pd.read_csv(tmp_path / "store" / "manifest.csv")
                                                             .query("split == 'test'").video)
    from sklearn.metrics import roc_auc_score
    known = scores[scores.label >= 0]
    assert r.metrics["frame_auc"] == pytest.approx(roc_auc_score(known.label, known.score))


@pytest.mark.slow   # about 40 s; the shard arithmetic itself is covered by the plan tests
def test_shards_split_the_list_and_agree_with_one_process(tmp_path):
    videos = tmp_path / "videos"
    _camera_folder(videos)
    settings, model = Settings("mc3_18", "none", 1, None), _random("mc3_18")
    whole = extract_folder(videos, tmp_path / "one", model, settings, progress=False)
    parts = [extract_folder(videos, tmp_path / "two", model, settings, shard=parse_shard(f"{i}/3"),
                            progress=False) for i in range(3)]
    names = [v for p in parts for v in p.done]
    assert sorted(names) == sorted(whole.done) and len(names) == len(set(names)) == 8
    for v in whole.done:
        assert np.array_equal(np.load(tmp_path / "one" / f"{v}.npy"), np.load(tmp_path / "two" / f"{v}.npy"))
    with pytest.raises(WsadError, match="0 <= i < n"):
        parse_shard("3/3")
    with pytest.raises(WsadError, match="features of different settings never mix"):
        extract_folder(videos, tmp_path / "one", model, Settings("mc3_18", "none", 5, None), progress=False)


@pytest.mark.slow   # about 50 s (a kill mid-extraction, then the rest)
def test_a_killed_run_resumes_where_it_stopped(tmp_path):
    videos = tmp_path / "videos"
    _camera_folder(videos)
    args = [str(videos), "--out", str(tmp_path / "out"), "--weights", "none", "--backbone", "mc3_18", "--quiet"]
    code = "import sys; from wsad.cli.extract import main; sys.argv=['wsad-extract']+sys.argv[1:]; main()"
    proc = subprocess.Popen([sys.executable, "-c", code, *args], cwd=tmp_path, stdout=subprocess.PIPE,
                            stderr=subprocess.PIPE)
    deadline = time.time() + 300
    while time.time() < deadline and len(list((tmp_path / "out").glob("*.npy"))) < 2:
        time.sleep(0.05)
    proc.kill()
    proc.wait()
    first = {p.stem for p in (tmp_path / "out").glob("*.npy")}
    assert 2 <= len(first) < 8
    assert not list((tmp_path / "out").glob(".*.tmp*"))          # no half-written array left visible
    res = _cli(tmp_path, *args)
    assert res.returncode == 0, res.stderr[-2000:]
    assert f"{8 - len(first)} video(s) extracted, {len(first)} already done" in res.stdout
    whole = extract_folder(videos, tmp_path / "again", _random("mc3_18"), Settings("mc3_18", "none", 1, None),
                           progress=False)
    for v in whole.done:
        assert np.array_equal(np.load(tmp_path / "out" / f"{v}.npy"), np.load(tmp_path / "again" / f"{v}.npy"))


@pytest.mark.slow   # about 30 s; submitit itself is exercised by the sweep and study tests
def test_shards_through_submitit_locally(tmp_path):
    videos = tmp_path / "videos"
    _camera_folder(videos)
    res = _cli(tmp_path, str(videos), "--out", str(tmp_path / "out"), "--weights", "none", "--backbone",
               "mc3_18", "--submit", "local", "--shards", "2", "--threads", "1")
    assert res.returncode == 0, res.stderr[-2000:]
    assert "8 video(s) extracted" in res.stdout and len(list((tmp_path / "out").glob("*.npy"))) == 8
