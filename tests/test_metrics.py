"""Metrics against outside references: scikit-learn and SciPy."""
from __future__ import annotations

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st
from scipy.stats import mannwhitneyu
from sklearn.metrics import average_precision_score, roc_auc_score

from wsad.data import chunk_bounds, chunks_to_segments
from wsad.errors import WsadError
from wsad.evaluate import (
    VideoScores,
    average_precision,
    compute_metrics,
    grouped_bootstrap,
    grouped_bootstrap_values,
    per_video_table,
    roc_auc,
)
from wsad.store import segments_to_frames


@pytest.mark.parametrize("seed", range(5))
def test_auc_ap_match_sklearn_with_ties(seed):
    # Reference: sklearn.metrics.roc_auc_score / average_precision_score.
    rng = np.random.default_rng(seed)
    y = rng.random(5000) < 0.2
    s = np.round(rng.random(5000) + 0.3 * y, 1)  # rounding makes many ties
    assert abs(roc_auc(y, s) - roc_auc_score(y, s)) < 1e-9
    assert abs(average_precision(y, s) - average_precision_score(y, s)) < 1e-9


def test_auc_worked_example_mann_whitney():
    # Reference: the Mann-Whitney U statistic (scipy.stats.mannwhitneyu), AUC = U / (n+ n-).
    pos = np.array([0.9, 0.8, 0.8, 0.3])
    neg = np.array([0.8, 0.2, 0.1])
    u = mannwhitneyu(pos, neg, alternative="two-sided").statistic
    y = np.r_[np.ones(4), np.zeros(3)]
    auc = roc_auc(y, np.r_[pos, neg])
    assert auc == pytest.approx(u / 12, abs=1e-12)
    # by hand: pairs won 9, tied 2 (0.8 vs 0.8) -> (9 + 1) / 12
    assert auc == pytest.approx(10 / 12, abs=1e-12)


def test_all_equal_scores_give_half():
    y = np.array([0, 1, 0, 1, 1])
    assert roc_auc(y, np.full(5, 0.3)) == 0.5


def test_single_class_is_a_clear_error():
    with pytest.raises(WsadError, match="needs both classes"):
        roc_auc(np.zeros(10), np.random.default_rng(0).random(10))
    with pytest.raises(WsadError, match="needs both classes"):
        average_precision(np.ones(4), np.arange(4.0))


def test_segments_to_frames_tail_goes_to_last_segment():
    f = segments_to_frames(np.array([1.0, 2.0, 3.0]), frames=16 * 3 + 5)
    assert len(f) == 53
    assert (f[:16] == 1).all() and (f[16:32] == 2).all() and (f[32:] == 3).all()


@pytest.mark.parametrize("t", [7, 32, 33, 100, 250])
def test_chunks_cover_every_segment_once(t):
    b = chunk_bounds(t, 32)
    assert b[0] == 0 and b[-1] == t and (np.diff(b) >= 0).all()
    seg = chunks_to_segments(np.arange(32.0), t)
    # every segment maps to the chunk whose span holds it
    for i in range(32):
        if b[i + 1] > b[i]:
            assert (seg[b[i]:b[i + 1]] == i).all()


def _videos(seed=0, n=16, levels=None):
    rng = np.random.default_rng(seed)
    vids = []
    for i in range(n):
        t = int(rng.integers(5, 30))
        fr = t * 16 + int(rng.integers(0, 16))
        lab = i % 2
        fl = np.zeros(fr, np.int8)
        if lab:
            a = int(rng.integers(0, fr - 20))
            fl[a:a + int(rng.integers(5, 60))] = 1
        s = rng.random(t) + 0.5 * lab
        if levels:
            s = np.round(s, levels)
        vids.append(VideoScores(f"v{i}", f"cam{i % 4}", lab, s, fl, fr))
    return vids


def test_compute_metrics_against_sklearn():
    vids = _videos()
    m = compute_metrics(vids)
    y = np.concatenate([v.frame_labels for v in vids])
    s = np.concatenate([v.frame_scores() for v in vids])
    assert m["frame_auc"] == pytest.approx(roc_auc_score(y, s), abs=1e-12)
    assert m["frame_ap"] == pytest.approx(average_precision_score(y, s), abs=1e-12)
    an = [v for v in vids if v.label]
    assert m["anomalous_video_auc"] == pytest.approx(roc_auc_score(
        np.concatenate([v.frame_labels for v in an]), np.concatenate([v.frame_scores() for v in an])))
    norm = np.concatenate([v.frame_scores() for v in vids if not v.label])
    assert m["false_alarm_rate"] == pytest.approx((norm >= 0.5).mean())
    assert m["video_auc"] == pytest.approx(roc_auc_score([v.label for v in vids],
                                                         [v.segment_scores.max() for v in vids]))
    table = per_video_table(vids)
    assert list(table["video"]) == [v.video for v in vids]
    assert table.loc[1, "anomalous_share"] == pytest.approx(vids[1].frame_labels.mean())


def test_missing_events_skip_frame_metrics_with_warning():
    vids = _videos()
    vids[1].frame_labels = None
    with pytest.warns(UserWarning, match="no events"):
        m = compute_metrics(vids)
    kept = [v for v in vids if v.frame_labels is not None]
    y = np.concatenate([v.frame_labels for v in kept])
    s = np.concatenate([v.frame_scores() for v in kept])
    assert m["frame_auc"] == pytest.approx(roc_auc_score(y, s))
    assert "video_auc" in m  # video-level metrics still reported


def sklearn_bootstrap(vids, n, seed, by="video"):
    """The plain definition with scikit-learn's metrics: draw clusters (the same indices as the
    package), concatenate their videos' frames, score them."""
    from sklearn.metrics import average_precision_score

    from wsad.evaluate import bootstrap_indices

    keys = [v.video if by == "video" else v.group for v in vids]
    clusters = sorted(set(keys))
    members = [[i for i, k in enumerate(keys) if k == c] for c in clusters]
    auc, ap = np.full(n, np.nan), np.full(n, np.nan)
    for r, rows in enumerate(bootstrap_indices(len(clusters), n, seed)):
        drawn = [i for c in rows for i in members[c]]
        y = np.concatenate([vids[i].frame_labels for i in drawn])
        s = np.concatenate([vids[i].frame_scores() for i in drawn])
        if 0 < y.sum() < len(y):
            auc[r], ap[r] = roc_auc_score(y, s), average_precision_score(y, s)
    return auc, ap


@pytest.mark.parametrize("levels", [None, 1])
def test_grouped_bootstrap_equals_naive(levels):
    # Reference: the plain definition with scikit-learn's roc_auc_score and average_precision_score
    # on the concatenated frames of the drawn videos (same indices).
    vids = _videos(seed=3, levels=levels)
    fast_auc, fast_ap = grouped_bootstrap_values(vids, 60, seed=5)
    auc, ap = sklearn_bootstrap(vids, 60, seed=5)
    assert np.array_equal(np.isnan(fast_auc), np.isnan(auc))
    ok = ~np.isnan(auc)
    assert np.max(np.abs(fast_auc[ok] - auc[ok])) < 1e-9
    assert np.max(np.abs(fast_ap[ok] - ap[ok])) < 1e-9


def test_bootstrap_interval_contains_point_and_is_seeded():
    vids = _videos(seed=4, n=30)
    m = compute_metrics(vids)
    a = grouped_bootstrap(vids, 300, seed=1)
    assert a["frame_auc_lo"] < m["frame_auc"] < a["frame_auc_hi"]
    assert a["frame_ap_lo"] < m["frame_ap"] < a["frame_ap_hi"]
    assert a == grouped_bootstrap(vids, 300, seed=1)
    assert a != grouped_bootstrap(vids, 300, seed=2)


@settings(max_examples=200, deadline=None)
@given(st.lists(st.integers(-5, 5), min_size=1, max_size=60), st.booleans())
def test_average_ranks_equal_scipy_rankdata(values, spread):
    """The mid-ranks behind the AUC equal ``scipy.stats.rankdata`` (method "average") exactly,
    ties included (reference: SciPy)."""
    from scipy.stats import rankdata

    from wsad.evaluate.metrics import average_ranks

    s = np.asarray(values, dtype=np.float64) * (0.37 if spread else 1.0)
    got = average_ranks(s)
    assert got.dtype == np.float64 and np.array_equal(got, rankdata(s))
    with_nan = np.r_[s, np.nan]
    assert np.isnan(average_ranks(with_nan)).all() and np.isnan(rankdata(with_nan)).all()


def test_macro_auc_is_the_mean_within_video_auc_and_ignores_video_offsets():
    # Reference: scikit-learn's roc_auc_score on each anomalous video's own frames, averaged. A
    # random constant added to each video's scores leaves every within-video ranking, and so
    # the macro AUC, unchanged, while the micro frame AUC moves (it also compares across videos).
    vids = _videos(seed=6, n=20)
    per = [roc_auc_score(v.frame_labels, v.frame_scores()) for v in vids
           if v.label == 1 and 0 < v.frame_labels.sum() < len(v.frame_labels)]
    m = compute_metrics(vids)
    assert m["macro_auc"] == pytest.approx(np.mean(per))
    rng = np.random.default_rng(1)
    shifted = [VideoScores(v.video, v.group, v.label, v.segment_scores + rng.normal(0, 3), v.frame_labels, v.frames)
               for v in vids]
    m2 = compute_metrics(shifted)
    assert m2["macro_auc"] == pytest.approx(m["macro_auc"]) and abs(m2["frame_auc"] - m["frame_auc"]) > 0.02
