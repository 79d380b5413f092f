"""Open data: weakly labelled streams built from scikit-learn's bundled
handwritten digits (the UCI optical recognition of handwritten digits set,
1,797 real 8x8 images). Anomalies are short runs of one held-out digit class
inside streams of the other classes; only video labels reach training."""
from __future__ import annotations

import numpy as np
import pandas as pd
import pytest
from sklearn.datasets import load_digits
from sklearn.metrics import roc_auc_score

from wsad.config import compose_config
from wsad.store import build_store, check_store
from wsad.train import train

HELD_OUT = 8


def _streams(tmp_path, n_train=80, n_test=40, t=48, run=6, seed=0):
    x, y = load_digits(return_X_y=True)
    x = (x / 16.0).astype(np.float32)
    rng = np.random.default_rng(seed)
    pools = {}
    order = rng.permutation(len(x))
    cut = len(x) // 2
    for split, idx in (("train", order[:cut]), ("test", order[cut:])):  # no image in both splits
        pools[split] = {c: idx[y[idx] == c] for c in range(10)}
    feat = tmp_path / "digit_features"
    feat.mkdir()
    rows, events = [], []
    for split, n in (("train", n_train), ("test", n_test)):
        for i in range(n):
            label = i % 2
            classes = [c for c in range(10) if c != HELD_OUT]
            seq = []
            while len(seq) < t:  # runs of one class: consecutive segments are correlated
                c = classes[rng.integers(len(classes))]
                seq += [c] * run
            seq = np.array(seq[:t])
            if label:
                length = int(rng.integers(4, 9))
                start = int(rng.integers(0, t - length))
                seq[start:start + length] = HELD_OUT
                events.append({"video": f"{split}_{i:03d}", "start": start * 16,
                               "end": (start + length) * 16})
            imgs = np.stack([x[rng.choice(pools[split][c])] for c in seq])
            np.save(feat / f"{split}_{i:03d}.npy", imgs)
            rows.append({"video": f"{split}_{i:03d}", "label": label, "split": split,
                         "group": f"{split}_stream{i % 8}"})
    pd.DataFrame(rows).to_csv(tmp_path / "labels.csv", index=False)
    pd.DataFrame(events).to_csv(tmp_path / "events.csv", index=False)
    return build_store(feat, tmp_path / "labels.csv", tmp_path / "store",
                       events_csv=tmp_path / "events.csv", description="digits streams")


@pytest.fixture(scope="module")
def digit_store(tmp_path_factory):
    store = _streams(tmp_path_factory.mktemp("digits"))
    assert check_store(store, strict=True) == []
    return store


# Instance-level AUC measured at seeds 0 / 1 (each recipe at its own epochs: 30, mil_ranking 150):
# topk 0.979 / 0.986, windows 0.942 / 0.972, mil_ranking 0.839 / 0.919, magnitude 0.921 / 0.888,
# self_training 0.983 / 0.982; heads under topk: dilated 0.998 / 0.998, gated_attention
# 0.992 / 0.987, self_attention 0.948 / 0.965, temporal 0.997 / 0.995 (mlp is topk's own head).
# Before their adaptation to the feature scale, magnitude (margin 100) reached 0.624 and the
# self-attention head with sinusoidal positions 0.628 (see their docstrings).
CASES = {"topk": ("topk", []), "windows": ("windows", []), "mil_ranking": ("mil_ranking", []),
         "magnitude": ("magnitude", []), "self_training": ("self_training", []),
         "dilated_head": ("topk", ["head=dilated"]), "gated_attention_head": ("topk", ["head=gated_attention"]),
         "self_attention_head": ("topk", ["head=self_attention"]), "temporal_head": ("topk", ["head=temporal"])}


@pytest.mark.parametrize("case", list(CASES))
def test_every_recipe_and_head_finds_held_out_digit_runs(digit_store, tmp_path, case):
    recipe, extra = CASES[case]
    cfg = compose_config([f"data.root={digit_store}", "trainer.members=1", f"recipe={recipe}", "trainer.progress=false",
                          "tracking.enabled=false", "trainer.bootstrap=0", f"trainer.out_dir={tmp_path}/out", *extra])
    train(cfg)
    table = pd.read_parquet(tmp_path / "out" / "scores" / "test_scores.parquet")
    seg = table[table.frame % 16 == 0]  # one row per segment: instance level
    auc = roc_auc_score(seg.label, seg.score)  # reference: scikit-learn
    print(f"{case}: digits instance-level AUC {auc:.4f}")
    # 0.8: the lower end of "excellent discrimination" in Hosmer & Lemeshow's bands for the area
    # under the ROC curve (Applied Logistic Regression, 2nd ed., 2000; from memory)
    assert auc >= 0.8, auc
