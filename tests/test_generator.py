"""The synthetic generator: known ground truth, determinism, store validity."""
from __future__ import annotations

import numpy as np
import pytest
from conftest import make_store, tree_hash

from wsad.errors import WsadError
from wsad.store import FeatureStore, check_store
from wsad.synthetic import lag1_autocorrelation, load_scenario, reference_metrics


@pytest.mark.parametrize("rho", [0.0, 0.5, 0.9])
def test_lag1_autocorrelation_tracks_rho(tmp_path, rho):
    # Long videos and no events/busy periods so the AR(1) noise is all there is.
    st = FeatureStore(make_store(tmp_path / "s", overrides=[
        f"rho={rho}", "length.mean=400", "length.max=800", "busy.rate=0", "events.normal_rate=0"]))
    measured = lag1_autocorrelation(st, split="train", label=0)
    # de-meaning biases the estimate by about -(1 + 3 rho) / T (Kendall 1954, Biometrika; from memory)
    assert abs(measured - rho) < 0.03, measured


def test_signature_reference_high_snr_and_chance_at_zero_snr(tmp_path):
    big = ["videos_per_camera.test=24", "busy.rate=0"]
    hi = FeatureStore(make_store(tmp_path / "hi", overrides=big + ["events.snr=8"]))
    zero = FeatureStore(make_store(tmp_path / "zero", overrides=big + ["events.snr=0"]))
    # A shift of 8 noise sd along the signature gives a fully covered segment an AUC against normal
    # ones of Phi(8 / sqrt(2)) = 1 - 1e-8; 0.95 leaves room for onset ramps and partly covered
    # segments (common practice). With no shift the reference is at chance; 0.05 is several times
    # the AUC's standard error on this many test segments (Hanley & McNeil 1982; common practice).
    from scipy.stats import norm

    assert norm.cdf(8 / np.sqrt(2)) > 0.9999999
    assert reference_metrics(hi)["frame_auc"] >= 0.95
    assert abs(reference_metrics(zero)["frame_auc"] - 0.5) <= 0.05


def test_camera_share_grows_with_the_knob(tmp_path):
    # The intra-class correlation of video means by camera (Shrout & Fleiss 1979) on stores whose
    # videos of a camera share none, most or nearly all of their background.
    from wsad.synthetic import camera_share

    got = [camera_share(FeatureStore(make_store(tmp_path / f"s{s}", overrides=[f"camera_share={s}",
                                                                               "videos_per_camera.train=6"])))
           for s in (0.0, 0.7, 0.95)]
    assert got[0] < got[1] < got[2], got


def test_events_inside_videos_and_only_on_anomalous(small_store):
    st = FeatureStore(small_store)
    frames = dict(zip(st.manifest.video, st.manifest.frames))
    labels = dict(zip(st.manifest.video, st.manifest.label))
    assert len(st.events) > 0
    for v, s, e in st.events[["video", "start", "end"]].itertuples(index=False):
        assert 0 <= s < e <= frames[v]
        assert labels[v] == 1
    anomalous = set(st.manifest.video[st.manifest.label == 1])
    assert anomalous == set(st.events.video)  # every anomalous video has its events


def test_same_seed_byte_identical_other_seed_differs(tmp_path):
    a = tree_hash(make_store(tmp_path / "a"))
    b = tree_hash(make_store(tmp_path / "b"))
    c = tree_hash(make_store(tmp_path / "c", overrides=["seed=1"]))
    assert a == b
    assert a != c


def test_generated_store_passes_check(small_store):
    assert [p for p in check_store(small_store, strict=True)] == []


def test_manifest_grouped_by_camera_and_splits_disjoint(small_store):
    m = FeatureStore(small_store).manifest
    # each camera's rows are contiguous
    first = {g: i for i, g in reversed(list(enumerate(m.group)))}
    last = {g: i for i, g in enumerate(m.group)}
    assert all(last[g] - first[g] + 1 == (m.group == g).sum() for g in first)
    assert not set(m.group[m.split == "train"]) & set(m.group[m.split == "test"])


def test_multicrop_float32_and_dim(tmp_path):
    st = FeatureStore(make_store(tmp_path / "mc", overrides=["crops=5", "dtype=float32", "dim=16"]))
    v = st.videos()[0]
    assert st.raw(v).shape[0] == 5 and st.raw(v).shape[2] == 16
    assert st.raw(v).dtype == np.float32
    assert st.views(v).shape[0] == 1  # mean over crops by default
    each = FeatureStore(st.root, crops="each")
    assert each.views(v).shape[0] == 5
    np.testing.assert_allclose(each.views(v).mean(axis=0), st.views(v)[0], rtol=1e-5, atol=1e-5)


def test_label_noise_flips_only_train(tmp_path):
    clean = FeatureStore(make_store(tmp_path / "c")).manifest
    noisy = FeatureStore(make_store(tmp_path / "n", overrides=["label_noise=0.4"])).manifest
    flipped = clean.label != noisy.label
    assert flipped.sum() > 0
    assert (noisy.split[flipped] == "train").all()


def test_context_event_is_routine_in_loading_bay(tmp_path):
    """forklift signature appears in normal loading-bay videos, never as an event there."""
    st = FeatureStore(make_store(tmp_path / "ctx", scenario="warehouse_context",
                                 overrides=["events.snr=6", "busy.rate=0"]))
    from omegaconf import OmegaConf

    from wsad.synthetic import Signatures
    sig = Signatures.build(OmegaConf.create(st.meta["scenario"]))
    u = sig.event["forklift_in_walkway"]
    bay_normal = [v for v in st.videos() if v.startswith("loading_bay") and st.label(v) == 0]
    proj = [(st.views(v)[0] - sig.context["loading_bay"]) @ u for v in bay_normal]
    # routine forklifts push some segments of normal bay videos far along the signature
    assert max(p.max() - np.median(p) for p in proj) > 3
    assert st.manifest[st.manifest.group.str.startswith("loading_bay")].label.sum() == 0


def test_bad_override_is_refused():
    with pytest.raises(WsadError, match="no key"):
        load_scenario("warehouse", ["nonsense=1"])
    with pytest.raises(WsadError, match="rho"):
        load_scenario("warehouse", ["rho=1.5"])
    with pytest.raises(WsadError, match="unknown scenario"):
        load_scenario("no_such_place")
