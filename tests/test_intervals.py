"""Intervals for frame AUC with the video or the camera as the unit: the clustered
variance against hand computations, the camera bootstrap against its plain
definition, and the coverage of the default interval on simulated test sets
whose true AUC is known."""
from __future__ import annotations

import numpy as np
import pytest
from sklearn.metrics import roc_auc_score

from wsad.evaluate import VideoScores
from wsad.evaluate.bootstrap import bootstrap_naive, clustered_auc, grouped_bootstrap, grouped_bootstrap_values
from wsad.evaluate.coverage import DESIGNS, Design, coverage, simulate


def _single_frame_videos(rng, m=40, n=60):
    y = np.r_[np.ones(m, np.int8), np.zeros(n, np.int8)]
    s = np.round(rng.normal(y * 0.8, 1.0), 1)               # rounded: ties
    return [VideoScores(f"v{i}", f"g{i}", int(y[i]), s[i:i + 1], y[i:i + 1], 1, 1) for i in range(m + n)], y, s


def test_clustered_variance_with_one_frame_per_cluster_is_delong():
    # Reference: DeLong, DeLong & Clarke-Pearson (1988), written out with the explicit pair
    # matrix psi(x, y) = 1 if x > y, 1/2 if equal: V10_j = mean_k psi(x_j, y_k), V01_k =
    # mean_j psi(x_j, y_k), var = s10 / m + s01 / n (sample variances). Obuchowski's clustered
    # form with singleton clusters equals it up to the factors I/(I-1) and (m-1)/m, (n-1)/n.
    videos, y, s = _single_frame_videos(np.random.default_rng(0))
    x, z = s[y == 1], s[y == 0]
    psi = (x[:, None] > z[None, :]) + 0.5 * (x[:, None] == z[None, :])
    v10, v01 = psi.mean(1), psi.mean(0)
    m, n, k = len(x), len(z), len(s)
    delong = v10.var(ddof=1) / m + v01.var(ddof=1) / n
    auc, se, clusters = clustered_auc(videos, "video")
    assert auc == pytest.approx(roc_auc_score(y, s), abs=1e-12)     # reference: scikit-learn
    assert clusters == k
    expect = k / (k - 1) * ((m - 1) / m * v10.var(ddof=1) / m + (n - 1) / n * v01.var(ddof=1) / n)
    assert se ** 2 == pytest.approx(expect, rel=1e-12)
    assert se ** 2 == pytest.approx(delong, rel=0.03)


def test_camera_bootstrap_equals_its_plain_definition():
    videos = simulate(Design(6, 4, camera_sd=0.5), np.random.default_rng(3))
    fast = grouped_bootstrap_values(videos, 40, seed=2, by="group")
    slow = bootstrap_naive(videos, 40, seed=2, by="group")
    np.testing.assert_allclose(fast[0], slow[0], atol=1e-12)
    np.testing.assert_allclose(fast[1], slow[1], atol=1e-12)
    assert not np.allclose(fast[0], grouped_bootstrap_values(videos, 40, seed=2, by="video")[0])


def test_default_interval_is_clustered_and_names_its_clusters():
    videos = simulate(Design(12, 3, camera_sd=0.5), np.random.default_rng(1))
    by_group = grouped_bootstrap(videos, 100, seed=0, by="group")
    by_video = grouped_bootstrap(videos, 100, seed=0, by="video")
    assert by_group["interval_clusters"] == 12 and by_video["interval_clusters"] == 36
    auc, se, _ = clustered_auc(videos, "group")
    assert by_group["frame_auc_lo"] < auc < by_group["frame_auc_hi"]
    assert by_group["frame_auc_se"] == pytest.approx(se)
    pct = grouped_bootstrap(videos, 100, seed=0, by="group", interval="percentile")
    assert "frame_auc_se" not in pct and pct["frame_auc_lo"] != by_group["frame_auc_lo"]


@pytest.mark.parametrize("name,goal", [("(a) 150 independent videos", 0.94), ("(b) 15 cameras x 10 videos", 0.90)])
def test_default_interval_covers(name, goal):
    # The coverage of the 95% interval wsad logs by default (clustered variance with t quantiles,
    # the camera as the unit when cameras are shared), over 1000 simulated test sets whose true
    # micro frame AUC is known in closed form (wsad.evaluate.coverage). Goals from the issue
    # that asked for them: >= 0.94 for independent videos, >= 0.90 for 15 cameras.
    design, by = DESIGNS[name]
    res = coverage(design, 1000, by, "clustered", seed=0)
    print(name, res)
    assert res["coverage"] >= goal, res
    assert abs(res["mean_auc"] - res["true_auc"]) < 0.005          # the estimand is the right one
    assert res["width"] < 0.15
