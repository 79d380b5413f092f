"""The store: every kind of bad input gets a clear line naming the video, a
non-zero exit, no traceback, and no file changed."""
from __future__ import annotations

import json
import shutil
import subprocess
import sys
from pathlib import Path

import numpy as np
import pandas as pd
import pytest
from conftest import tree_hash

from wsad.errors import WsadError
from wsad.store import FeatureStore, build_store, check_store, store_fingerprint
from wsad.store.format import crop_mean


def run_cli(tmp_path: Path, *args: str) -> subprocess.CompletedProcess:
    """A console script as a user runs it (a real process)."""
    code = (f"import sys; from wsad.cli.{args[0]} import main; sys.argv=['x']+sys.argv[1:]; main()"
            )
    return subprocess.run([sys.executable, "-c", code, *args[1:]], capture_output=True, text=True,
                          cwd=tmp_path, timeout=120)


def _copy(src: Path, dst: Path) -> Path:
    shutil.copytree(src, dst, symlinks=True)
    return dst


def _first(store: Path, split="train", label=None) -> str:
    m = pd.read_csv(store / "manifest.csv", dtype={"video": str})
    m = m[m.split == split] if label is None else m[(m.split == split) & (m.label == label)]
    return m.video.iloc[0]


def _edit_manifest(root: Path, fn) -> None:
    m = pd.read_csv(root / "manifest.csv", dtype=str, keep_default_na=False)
    fn(m)
    m.to_csv(root / "manifest.csv", index=False)


def _edit_events(root: Path, rows: list[dict]) -> None:
    ev = pd.read_csv(root / "events.csv", dtype=str)
    pd.concat([ev, pd.DataFrame(rows)]).to_csv(root / "events.csv", index=False)


def _array(root: Path, video: str) -> Path:
    m = pd.read_csv(root / "manifest.csv", dtype=str)
    return root / m.set_index("video").loc[video, "file"]


# Each case breaks a copy of a clean store one way; `expect` must appear in the message.
def case_manifest_missing(r):
    (r / "manifest.csv").unlink()
    return "-", "manifest.csv is missing"


def case_manifest_columns(r):
    m = pd.read_csv(r / "manifest.csv")
    m.drop(columns=["group"]).to_csv(r / "manifest.csv", index=False)
    return "-", "lacks column"


def case_bad_label(r):
    v = _first(r)
    _edit_manifest(r, lambda m: m.__setitem__("label", m.label.where(m.video != v, "yes")))
    return v, "label is 'yes'"


def case_bad_split(r):
    v = _first(r)
    _edit_manifest(r, lambda m: m.__setitem__("split", m.split.where(m.video != v, "val")))
    return v, "split is 'val'"


def case_duplicate(r):
    m = pd.read_csv(r / "manifest.csv", dtype=str)
    pd.concat([m, m.iloc[:1]]).to_csv(r / "manifest.csv", index=False)
    return m.video.iloc[0], "more than once"


def case_escaping_path(r):
    v = _first(r)
    _edit_manifest(r, lambda m: m.__setitem__("file", m.file.where(m.video != v, "../x.npy")))
    return v, "leaves the store"


def case_absolute_path(r):
    v = _first(r)
    _edit_manifest(r, lambda m: m.__setitem__("file", m.file.where(m.video != v, "/tmp/x.npy")))
    return v, "absolute"


def case_bad_frames(r):
    v = _first(r)
    _edit_manifest(r, lambda m: m.__setitem__("frames", m.frames.where(m.video != v, "-3")))
    return v, "frames is '-3'"


def case_array_missing(r):
    v = _first(r)
    _array(r, v).unlink()
    return v, "missing"


def case_array_truncated(r):
    v = _first(r)
    p = _array(r, v)
    p.write_bytes(p.read_bytes()[:-200])
    return v, "truncated"


def case_array_garbage(r):
    v = _first(r)
    _array(r, v).write_bytes(b"not an array at all")
    return v, "unreadable"


def case_wrong_dim(r):
    v = _first(r)
    a = np.load(_array(r, v))
    np.save(_array(r, v), a[:, :-1])
    return v, "feature dim"


def case_wrong_dtype(r):
    v = _first(r)
    np.save(_array(r, v), np.load(_array(r, v)).astype(np.int32))
    return v, "dtype"


def case_nan(r):
    v = _first(r)
    a = np.load(_array(r, v))
    a[3, 2] = np.nan
    np.save(_array(r, v), a)
    return v, "NaN"


def case_inf(r):
    v = _first(r)
    a = np.load(_array(r, v)).astype(np.float32)
    a[0, 0] = np.inf
    np.save(_array(r, v), a)
    return v, "Inf"


def case_empty_array(r):
    v = _first(r)
    np.save(_array(r, v), np.zeros((0, 64), np.float16))
    return v, "empty"


def case_wrong_length(r):
    v = _first(r)
    a = np.load(_array(r, v))
    np.save(_array(r, v), a[:-2])
    return v, "segments but"


def case_event_unknown_video(r):
    _edit_events(r, [{"video": "ghost_cam_v001", "start": "0", "end": "10"}])
    return "ghost_cam_v001", "not in manifest"


def case_event_out_of_range(r):
    v = _first(r, "test", 1)
    _edit_events(r, [{"video": v, "start": "0", "end": "99999999"}])
    return v, "outside the video"


def case_event_inverted(r):
    v = _first(r, "test", 1)
    _edit_events(r, [{"video": v, "start": "50", "end": "20"}])
    return v, "inverted"


def case_event_overlap(r):
    v = _first(r, "test", 1)
    ev = pd.read_csv(r / "events.csv")
    s, e = ev[ev.video == v].iloc[0][["start", "end"]]
    _edit_events(r, [{"video": v, "start": str(s), "end": str(e)}])
    return v, "overlap"


def case_event_on_normal(r):
    v = _first(r, "test", 0)
    _edit_events(r, [{"video": v, "start": "0", "end": "10"}])
    return v, "normal video"


def case_store_json_unreadable(r):
    (r / "store.json").write_text("{not json")
    return "-", "store.json is not valid JSON"


def case_store_json_dim(r):
    (r / "store.json").write_text(json.dumps({"format": 1, "dim": "big", "segment_frames": 16}))
    return "-", "dim is 'big'"


def _set_fps(r, value):
    meta = json.loads((r / "store.json").read_text())
    meta["fps"] = value
    (r / "store.json").write_text(json.dumps(meta))


def case_fps_text(r):
    _set_fps(r, "25fps")
    return "-", "fps is '25fps'"


def case_fps_zero(r):
    _set_fps(r, 0)
    return "-", "fps is 0"


def case_fps_bool(r):
    _set_fps(r, True)
    return "-", "fps is True"


CASES = [v for k, v in sorted(globals().items()) if k.startswith("case_")]


@pytest.mark.parametrize("case", CASES, ids=lambda f: f.__name__[5:])
def test_each_bad_input_reported_clearly(small_store, tmp_path, case):
    root = _copy(small_store, tmp_path / "store")
    video, expect = case(root)
    before = tree_hash(root)
    problems = [p for p in check_store(root) if p.severity == "error"]
    hit = [p for p in problems if expect in p.message]
    assert hit, [str(p) for p in problems]
    assert hit[0].video == video
    res = run_cli(tmp_path, "check", str(root))
    assert res.returncode == 2
    assert "Traceback" not in res.stderr
    if video != "-":
        assert video in res.stderr
    assert tree_hash(root) == before  # nothing changed


def test_every_problem_listed_not_just_first(small_store, tmp_path):
    root = _copy(small_store, tmp_path / "store")
    case_nan(root)
    m = pd.read_csv(root / "manifest.csv")
    second = m.video.iloc[1]
    _array(root, second).unlink()
    case_event_on_normal(root)
    videos = {p.video for p in check_store(root) if p.severity == "error"}
    assert {m.video.iloc[0], second, _first(root, "test", 0)} <= videos


def test_clean_store_summary_and_exit_zero(small_store, tmp_path):
    res = run_cli(tmp_path, "check", str(small_store))
    assert res.returncode == 0, res.stderr
    for word in ("train", "test", "anomalous", "normal", "groups", "segments", "dim 64",
                 "anomalous-frame share"):
        assert word in res.stdout


def test_group_leakage_warning_and_strict_error(small_store, tmp_path):
    root = _copy(small_store, tmp_path / "store")
    m = pd.read_csv(root / "manifest.csv", dtype=str)
    g = m.group[m.split == "train"].iloc[0]
    i = m.index[m.split == "test"][0]
    m.loc[i, "group"] = g
    m.to_csv(root / "manifest.csv", index=False)
    warn = [p for p in check_store(root) if "leakage" in p.message]
    assert warn and warn[0].severity == "warning"
    assert run_cli(tmp_path, "check", str(root)).returncode == 0
    strict = [p for p in check_store(root, strict=True) if "leakage" in p.message]
    assert strict[0].severity == "error"
    assert run_cli(tmp_path, "check", str(root), "--strict").returncode == 2


def _own_features(tmp_path: Path, crops: int = 0):
    rng = np.random.default_rng(0)
    feat = tmp_path / "my_features"
    feat.mkdir()
    rows = []
    for i in range(8):
        t = 20 + i
        shape = (crops, t, 8) if crops else (t, 8)
        np.save(feat / f"clip {i}.npy", rng.standard_normal(shape).astype(np.float32))
        rows.append({"video": f"clip {i}", "label": i % 2, "split": "train" if i < 4 else "test",
                     "group": f"bay{i // 4}"})
    pd.DataFrame(rows).to_csv(tmp_path / "labels.csv", index=False)
    pd.DataFrame([{"video": "clip 5", "start": 16, "end": 100},
                  {"video": "clip 7", "start": 0, "end": 40}]).to_csv(tmp_path / "events.csv", index=False)
    return feat


def test_index_links_without_touching_user_arrays(tmp_path):
    feat = _own_features(tmp_path)
    before = tree_hash(feat)
    res = run_cli(tmp_path, "index", str(feat), "--labels", "labels.csv", "--events", "events.csv",
                  "--out", "store")
    assert res.returncode == 0, res.stderr
    st = FeatureStore(tmp_path / "store")
    assert len(st.videos()) == 8 and st.dim == 8
    assert st.frames("clip 3") == 23 * 16  # frames default to T * 16
    assert (tmp_path / "store" / st.row("clip 0")["file"]).is_symlink()
    np.testing.assert_array_equal(st.views("clip 2")[0], np.load(feat / "clip 2.npy"))
    assert tree_hash(feat) == before
    assert check_store(tmp_path / "store") == []
    # refuses to write into a folder that is not empty
    res = run_cli(tmp_path, "index", str(feat), "--labels", "labels.csv", "--out", "store")
    assert res.returncode == 2 and "not empty" in res.stderr and "Traceback" not in res.stderr


def test_index_copy_and_multicrop(tmp_path):
    feat = _own_features(tmp_path, crops=3)
    out = build_store(feat, tmp_path / "labels.csv", tmp_path / "copied", copy=True)
    st = FeatureStore(out)
    f = out / st.row("clip 1")["file"]
    assert f.is_file() and not f.is_symlink()
    assert st.views("clip 1").shape == (1, 21, 8)
    assert FeatureStore(out, crops="each").views("clip 1").shape == (3, 21, 8)


@pytest.mark.parametrize("dtype", ["float16", "float32"])
def test_crop_mean_is_numpys_mean_bit_for_bit(dtype):
    """The reference is numpy's own ``mean(axis=0, dtype=float32)``: the crop mean must give the
    same bits (scores of multi-view stores did not move when it became faster)."""
    rng = np.random.default_rng(3)
    for views, t, d in [(1, 5, 3), (2, 7, 8), (5, 33, 16), (10, 250, 64), (12, 3, 1024)]:
        x = (rng.standard_normal((views, t, d)) * rng.choice([1e-3, 1, 300], (views, 1, d))).astype(dtype)
        got = crop_mean(x)
        assert got.dtype == np.float32
        np.testing.assert_array_equal(got, x.mean(axis=0, dtype=np.float32))


def test_multicrop_rows_read_alone_equal_the_whole_mean(tmp_path):
    feat = _own_features(tmp_path, crops=3)
    st = FeatureStore(build_store(feat, tmp_path / "labels.csv", tmp_path / "store"))
    whole = st.view("clip 1")
    np.testing.assert_array_equal(st.view("clip 1", rows=slice(4, 9)), whole[4:9])
    np.testing.assert_array_equal(whole, st.raw("clip 1").mean(axis=0, dtype=np.float32))
    assert not st.raw("clip 1").flags.writeable   # the user's arrays stay read-only maps


def test_index_missing_array_is_one_clear_line(tmp_path):
    feat = _own_features(tmp_path)
    (feat / "clip 4.npy").unlink()
    res = run_cli(tmp_path, "index", str(feat), "--labels", "labels.csv", "--out", "store")
    assert res.returncode == 2 and "clip 4" in res.stderr
    assert len(res.stderr.strip().splitlines()) == 1
    assert not (tmp_path / "store").exists()


def test_fingerprint_tracks_content(small_store, tmp_path):
    root = _copy(small_store, tmp_path / "store")
    a = store_fingerprint(root)
    assert store_fingerprint(root) == a and store_fingerprint(small_store) == a
    _edit_manifest(root, lambda m: m.__setitem__("label", m.label.where(m.index != 0, "1")
                                                 if m.label[0] == "0" else m.label.where(m.index != 0, "0")))
    assert store_fingerprint(root) != a


def test_store_refuses_unknown_crop_mode(small_store):
    with pytest.raises(WsadError, match="crops"):
        FeatureStore(small_store, crops="median")


def test_fps_is_optional_written_by_the_generator_and_by_index(small_store, tmp_path):
    assert FeatureStore(small_store).fps == 25.0       # the scenarios say 25
    root = _copy(small_store, tmp_path / "nofps")
    meta = json.loads((root / "store.json").read_text())
    meta.pop("fps")
    (root / "store.json").write_text(json.dumps(meta))
    assert [p for p in check_store(root) if p.severity == "error"] == []
    assert FeatureStore(root).fps is None
    feats = tmp_path / "feats"
    feats.mkdir()
    np.save(feats / "a.npy", np.zeros((4, 3), np.float32))
    np.save(feats / "b.npy", np.ones((5, 3), np.float32))
    pd.DataFrame({"video": ["a", "b"], "label": [0, 1], "split": ["train", "train"]}).to_csv(
        tmp_path / "labels.csv", index=False)
    out = build_store(feats, tmp_path / "labels.csv", tmp_path / "indexed", fps=29.97)
    assert FeatureStore(out).fps == pytest.approx(29.97)
    with pytest.raises(WsadError, match="--fps"):
        build_store(feats, tmp_path / "labels.csv", tmp_path / "indexed2", fps=-1)


def test_a_clean_check_is_remembered_until_the_store_changes(small_store, tmp_path, monkeypatch):
    from wsad.store import check_cache

    monkeypatch.setenv("XDG_CACHE_HOME", str(tmp_path / "cache"))
    monkeypatch.setattr(check_cache, "_CLEAN", set())
    root = tmp_path / "s"
    shutil.copytree(small_store, root)
    calls = []
    real = check_cache.check_store
    monkeypatch.setattr(check_cache, "check_store", lambda r: calls.append(r) or real(r))
    assert check_cache.errors_of(root) == [] and len(calls) == 1
    assert check_cache.errors_of(root) == [] and len(calls) == 1          # remembered in the process
    monkeypatch.setattr(check_cache, "_CLEAN", set())
    assert check_cache.errors_of(root) == [] and len(calls) == 1          # and on disk, outside the store
    assert tree_hash(root) == tree_hash(small_store)                      # the store itself untouched
    man = pd.read_csv(root / "manifest.csv")
    a = np.load(root / man.file[0])
    a[0, 0] = np.nan                                                      # re-exported with a NaN
    np.save(root / man.file[0], a)
    errors = check_cache.errors_of(root)
    assert len(calls) == 2 and any("NaN" in str(e) for e in errors)
    assert check_cache.errors_of(root) and len(calls) == 3                # a broken store is never remembered
