"""Intervals for frame AUC with the camera as the unit: the clustered variance and the
jackknife against hand computations, the camera bootstrap against scikit-learn on the drawn
cameras, and the coverage of the default interval over the simulation family."""
from __future__ import annotations

import numpy as np
import pytest
from sklearn.metrics import roc_auc_score

from wsad.evaluate import VideoScores
from wsad.evaluate.bootstrap import clustered_auc, grouped_bootstrap_values
from wsad.evaluate.coverage import Design, simulate
from wsad.evaluate.intervals import grouped_bootstrap


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
    # Reference: scikit-learn's metrics on the frames of the drawn cameras (tests/test_metrics.py).
    from test_metrics import sklearn_bootstrap

    videos = simulate(Design(6, 4, camera_sd=0.5), np.random.default_rng(3))
    fast = grouped_bootstrap_values(videos, 40, seed=2, by="group")
    slow = sklearn_bootstrap(videos, 40, seed=2, by="group")
    np.testing.assert_allclose(fast[0], slow[0], atol=1e-12)
    np.testing.assert_allclose(fast[1], slow[1], atol=1e-12)
    assert not np.allclose(fast[0], grouped_bootstrap_values(videos, 40, seed=2, by="video")[0])


def test_jackknife_interval_by_hand():
    # Leave-one-camera-out AUCs with scikit-learn, the jackknife se on the logit scale, Kish's
    # effective number of clusters and Student t from SciPy, all computed here.
    from scipy import stats

    from wsad.evaluate.intervals import effective_clusters, jackknife_interval, jackknife_values

    videos = simulate(Design(7, 3, camera_sd=0.5), np.random.default_rng(4))
    cams = sorted({v.group for v in videos})
    loo = []
    for c in cams:
        kept = [v for v in videos if v.group != c]
        loo.append(roc_auc_score(np.concatenate([v.frame_labels for v in kept]),
                                 np.concatenate([v.frame_scores() for v in kept])))
    np.testing.assert_allclose(jackknife_values(videos, "group"), loo, atol=1e-12)
    k = len(cams)
    z = np.log(np.array(loo) / (1 - np.array(loo)))
    se = np.sqrt((k - 1) / k * np.sum((z - z.mean()) ** 2))
    pos = np.array([sum(v.frame_labels.sum() for v in videos if v.group == c) for c in cams], float)
    neg = np.array([sum(len(v.frame_labels) - v.frame_labels.sum() for v in videos if v.group == c) for c in cams])
    w = pos / pos.sum() + neg / neg.sum()
    keff = w.sum() ** 2 / (w ** 2).sum()
    assert effective_clusters(videos, "group") == pytest.approx(keff)
    a = roc_auc_score(np.concatenate([v.frame_labels for v in videos]),
                      np.concatenate([v.frame_scores() for v in videos]))
    half = stats.t.ppf(0.975, keff - 1) * se
    lo, hi, _, clusters = jackknife_interval(videos, "group")
    assert clusters == k
    assert lo == pytest.approx(1 / (1 + np.exp(-(np.log(a / (1 - a)) - half))))
    assert hi == pytest.approx(1 / (1 + np.exp(-(np.log(a / (1 - a)) + half))))


def test_default_interval_is_the_jackknife_with_the_camera_as_unit():
    from wsad.evaluate import Scored, evaluate

    videos = simulate(Design(12, 3, camera_sd=0.5), np.random.default_rng(1))
    ev = evaluate(Scored(videos, {}, None), None)
    assert ev.metrics["interval_clusters"] == 12 and ev.settings.interval == "jackknife"
    ref = grouped_bootstrap(videos, 1000, seed=0, by="group", interval="jackknife")
    assert (ev.metrics["frame_auc_lo"], ev.metrics["frame_auc_hi"]) == (ref["frame_auc_lo"], ref["frame_auc_hi"])
    clustered = grouped_bootstrap(videos, 100, seed=0, by="group", interval="clustered")
    auc, se, _ = clustered_auc(videos, "group")
    assert clustered["frame_auc_lo"] < auc < clustered["frame_auc_hi"]
    assert clustered["frame_auc_se"] == pytest.approx(se)
    few = evaluate(Scored(simulate(Design(5, 3, camera_sd=0.5), np.random.default_rng(2)), {}, None), None)
    (line,) = [w for w in few.warnings if "camera(s)" in w]   # few cameras: said, with the measured coverage
    assert line.startswith("the test split has 5 camera(s)") and "in simulated test sets of 6 cameras" in line


@pytest.mark.parametrize("cameras,unequal", [(8, True), (16, True)])
def test_default_interval_covers_in_the_family(cameras, unequal):
    """The fast form of scripts/coverage_table.py: 150 simulated test sets of a design of the
    family (wsad.evaluate.designs) whose true frame AUC comes from a 3,000-camera test set. The
    goal (the issue that asked for it): >= 0.93 at 8, 16 and 40 cameras; at 150 replicates the
    binomial se near 0.93 is 0.021, so the fast form asks for 0.93 - 2 se."""
    from wsad.evaluate.designs import Family, family_coverage

    rows = {r["interval"]: r for r in family_coverage(Family(cameras, unequal=unequal), 150, seed=7, n_resamples=100)}
    assert rows["jackknife"]["coverage"] >= 0.93 - 2 * np.sqrt(0.93 * 0.07 / 150), rows["jackknife"]
    assert rows["jackknife"]["width"] < 0.45
