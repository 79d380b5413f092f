"""The video decision: a threshold chosen on weak validation only, and the accuracy it gives."""
from __future__ import annotations

import os
import shutil

import numpy as np
import pandas as pd
import pytest
from sklearn.metrics import accuracy_score, balanced_accuracy_score

from wsad.config import compose_config
from wsad.errors import WsadError
from wsad.evaluate.decision import balanced_accuracy, choose_video_threshold
from wsad.train import train


def test_threshold_maximises_balanced_accuracy_by_hand():
    # Cuts at each score (called anomalous when score >= cut); balanced accuracies by hand:
    # 0.1 -> 0.5, 0.2 -> 0.667, 0.35 -> 0.833, 0.4 -> 0.583, 0.8 -> 0.75. The best cut is 0.35,
    # and the threshold sits halfway to the next lower score: (0.35 + 0.2) / 2.
    s, y = [0.1, 0.2, 0.35, 0.4, 0.8], [0, 0, 1, 0, 1]
    assert choose_video_threshold(s, y) == pytest.approx(0.275)
    rng = np.random.default_rng(0)
    for _ in range(20):   # reference: sklearn.metrics.balanced_accuracy_score
        yy, pred = rng.random(30) < 0.4, rng.random(30) < 0.5
        if yy.any() and not yy.all():
            assert balanced_accuracy(pred, yy) == pytest.approx(balanced_accuracy_score(yy, pred))


def test_threshold_between_the_class_medians_by_hand():
    # normal 0.1, 0.2, 0.4 -> median 0.2; anomalous 0.35, 0.8 -> median 0.575; halfway: 0.3875
    s, y = [0.1, 0.2, 0.35, 0.4, 0.8], [0, 0, 1, 0, 1]
    assert choose_video_threshold(s, y, "class_medians") == pytest.approx(0.3875)
    assert choose_video_threshold(s, y, "balanced_accuracy") == pytest.approx(0.275)   # the default rule
    with pytest.raises(WsadError, match="class_medians"):
        choose_video_threshold(s, y, "youden")


def _permuted_copy(src, dst, seed=0):
    """The store with its test labels shuffled and the test events dropped (features linked)."""
    os.makedirs(dst / "features")
    for f in (src / "features").iterdir():
        os.symlink(f.resolve(), dst / "features" / f.name)
    shutil.copy(src / "store.json", dst / "store.json")
    man = pd.read_csv(src / "manifest.csv", dtype={"video": str, "group": str})
    test = man.split == "test"
    man.loc[test, "label"] = np.random.default_rng(seed).permutation(man.loc[test, "label"].to_numpy())
    man.to_csv(dst / "manifest.csv", index=False)
    ev = pd.read_csv(src / "events.csv", dtype={"video": str})
    ev[ev.video.isin(man[~test].video)].to_csv(dst / "events.csv", index=False)
    return dst


def test_no_test_label_chooses_the_threshold(small_store, tmp_path):
    common = ["recipe=topk", "trainer.epochs=3", "trainer.progress=false", "tracking.enabled=false",
              "trainer.bootstrap=0", "trainer.members=1"]
    a = train(compose_config([f"data.root={small_store}", f"trainer.out_dir={tmp_path}/a", *common]))
    perm = _permuted_copy(small_store, tmp_path / "perm")
    b = train(compose_config([f"data.root={perm}", f"trainer.out_dir={tmp_path}/b", *common]))
    assert a.metrics["video_threshold"] == b.metrics["video_threshold"]
    assert a.metrics["alarm/threshold"] == b.metrics["alarm/threshold"]   # the budget threshold too
    # the accuracy at it, recomputed from the exported scores (reference: scikit-learn)
    table = pd.read_parquet(tmp_path / "a" / "scores" / "test_scores.parquet")
    man = pd.read_csv(small_store / "manifest.csv", dtype={"video": str}).set_index("video")
    per = table.groupby("video").score.max()
    y = man.loc[per.index, "label"].to_numpy()
    pred = per.to_numpy() >= a.metrics["video_threshold"]
    assert a.metrics["video_accuracy"] == pytest.approx(accuracy_score(y, pred))
    assert a.metrics["video_balanced_accuracy"] == pytest.approx(balanced_accuracy_score(y, pred))
