"""Operating points in a run: the DET points against scikit-learn, the event-level trade-off
against the logged alarm metrics, transfer to other stores, and the second-site scenario."""
from __future__ import annotations

import numpy as np
import pandas as pd
import pytest
from conftest import make_store, tree_hash
from omegaconf import OmegaConf

from wsad.config import compose_config
from wsad.errors import WsadError
from wsad.report import budget_table
from wsad.synthetic import Signatures, load_scenario
from wsad.train import train

COMMON = ["recipe=topk", "trainer.epochs=3", "trainer.progress=false", "tracking.enabled=false",
          "trainer.bootstrap=0"]


@pytest.fixture(scope="module")
def second_site(tmp_path_factory):
    return make_store(tmp_path_factory.mktemp("site2") / "site2", scenario="warehouse_site2")


def test_run_writes_det_points_equal_to_scikit_learn(small_store, tmp_path):
    from sklearn.metrics import det_curve  # reference: scikit-learn

    r = train(compose_config([f"data.root={small_store}", "trainer.members=1", f"trainer.out_dir={tmp_path}", *COMMON]))
    frames = pd.read_csv(tmp_path / "scores" / "det_frames.csv")
    table = pd.read_parquet(tmp_path / "scores" / "test_scores.parquet")
    known = table[table.label >= 0]
    fpr, fnr, thr = det_curve(known.label.to_numpy(), known.score.to_numpy())
    finite = np.isfinite(thr)   # newer scikit-learn adds the point above every score (fpr 0, fnr 1)
    assert (fpr[~finite] == 0).all() and (fnr[~finite] == 1).all()
    fpr, fnr, thr = fpr[finite], fnr[finite], thr[finite]
    at = np.searchsorted(frames.threshold.to_numpy(), thr)
    assert np.allclose(frames.threshold.to_numpy()[at], thr)
    assert np.allclose(frames.fpr.to_numpy()[at], fpr) and np.allclose(frames.fnr.to_numpy()[at], fnr)
    # the event trade-off holds the budget threshold, with the logged operating point on it
    events = pd.read_csv(tmp_path / "scores" / "det_events.csv")
    hit = events[events.threshold == r.metrics["alarm/threshold"]]
    assert len(hit) == 1
    assert hit.event_miss.iloc[0] == pytest.approx(1 - r.metrics["alarm/event_recall"])
    assert hit.false_per_hour.iloc[0] == pytest.approx(r.metrics["alarm/false_per_hour"])
    # more alarms as the threshold falls to the lowest score: no event missed there
    assert events.sort_values("threshold").event_miss.iloc[0] == 0.0
    assert (tmp_path / "plots" / "det.png").stat().st_size > 10_000
    assert r.metrics["alarm/normal_hours"] > 0
    # other budgets after the fact, from the exported scores: the run's own budget gives its metrics
    table = budget_table(tmp_path, [1.0, 50.0, 500.0])
    own = table.iloc[0]
    for m in ("threshold", "event_recall", "false_per_hour", "frame_precision", "frame_recall"):
        assert own[m] == pytest.approx(r.metrics[f"alarm/{m}"], nan_ok=True), m
    assert table.threshold.is_monotonic_decreasing and table.event_recall.iloc[-1] >= own.event_recall


def test_transfer_to_itself_repeats_the_run_and_to_a_second_site_differs(small_store, second_site, tmp_path):
    r = train(compose_config([f"data.root={small_store}", "trainer.members=1", f"trainer.out_dir={tmp_path}", *COMMON,
                              f"evaluate.stores=[{small_store},{second_site}]"]))
    name = small_store.resolve().name
    # the training store scored as a transfer store: the same model, standardiser and threshold
    for m in ("frame_auc", "frame_ap", "video_auc", "alarm/event_recall", "alarm/false_per_hour"):
        assert r.metrics[f"transfer/{name}/{m}"] == pytest.approx(r.metrics[m], nan_ok=True), m
    assert r.metrics[f"transfer/{name}/alarm/threshold"] == r.metrics["alarm/threshold"]
    other = r.metrics["transfer/site2/frame_auc"]
    assert 0 < other < 1 and other != r.metrics["frame_auc"]
    assert r.metrics["transfer/site2/alarm/threshold"] == r.metrics["alarm/threshold"]  # the training site's
    table = pd.read_csv(tmp_path / "scores" / "transfer.csv")
    assert list(table.store) == [name, "site2"]
    assert table.set_index("store").loc["site2", "frame_auc"] == pytest.approx(other)
    at = budget_table(tmp_path, [1.0], on="site2").iloc[0]
    assert at.event_recall == pytest.approx(r.metrics["transfer/site2/alarm/event_recall"], nan_ok=True)
    assert at.false_per_hour == pytest.approx(r.metrics["transfer/site2/alarm/false_per_hour"])
    with pytest.raises(WsadError, match="no transfer store 'elsewhere'; it has: "):
        budget_table(tmp_path, [1.0], on="elsewhere")


def test_transfer_store_of_another_dim_fails_before_training(small_store, tmp_path):
    wide = make_store(tmp_path / "wide", overrides=["dim=32"])
    cfg = compose_config([f"data.root={small_store}", "trainer.members=1", f"trainer.out_dir={tmp_path}/run", *COMMON,
                          f"evaluate.stores=[{wide}]"])
    with pytest.raises(WsadError, match="32-d features but the training store"):
        train(cfg)
    assert not (tmp_path / "run" / "scores").exists()          # no epoch was trained
    with pytest.raises(WsadError, match="is not a folder"):
        train(compose_config([f"data.root={small_store}", "trainer.members=1",
                              *COMMON, f"evaluate.stores=[{tmp_path}/none]"]))


def test_second_site_keeps_events_and_redraws_the_site(tmp_path):
    # site=1 is the recipe without the key: the same footage byte for byte (store.json records the key)
    a = tree_hash(make_store(tmp_path / "a"))
    b = tree_hash(make_store(tmp_path / "b", overrides=["site=1"]))
    assert len(a) > 3 and {k: v for k, v in a.items() if k != "store.json"} == {
        k: v for k, v in b.items() if k != "store.json"}
    one, two = load_scenario("warehouse"), load_scenario("warehouse_site2")
    s1, s2 = Signatures.build(one), Signatures.build(two)
    for t in s1.event:                          # what an incident looks like does not change
        assert np.array_equal(s1.event[t], s2.event[t])
    assert np.array_equal(s1.busy, s2.busy)
    for k in s1.context:                        # the scenes' looks do
        assert np.corrcoef(s1.context[k], s2.context[k])[0, 1] < 0.5
    st = make_store(tmp_path / "c", scenario="warehouse_site2")
    man = pd.read_csv(st / "manifest.csv")
    assert man.group.str.startswith("site2_").all()
    assert OmegaConf.to_container(two)["site"] == 2
    with pytest.raises(WsadError, match="site"):
        load_scenario("warehouse", ["site=0"])
