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


# measured at seed 0, 30 epochs: topk 0.979, self_training 0.983, topk + dilated head 0.998;
# the magnitude recipe (0.624) and the self-attention head (0.628) do not reach it here
@pytest.mark.parametrize("recipe,extra", [("topk", []), ("self_training", []), ("topk", ["head=dilated"])],
                         ids=["topk", "self_training", "dilated_head"])
def test_recipe_finds_held_out_digit_runs(tmp_path, recipe, extra):
    store = _streams(tmp_path)
    assert check_store(store, strict=True) == []
    cfg = compose_config([f"data.root={store}", f"recipe={recipe}", "trainer.epochs=30",
                          "trainer.progress=false", "tracking.enabled=false", "trainer.bootstrap=0",
                          f"trainer.out_dir={tmp_path}/out", *extra])
    train(cfg)
    table = pd.read_parquet(tmp_path / "out" / "scores" / "test_scores.parquet")
    seg = table[table.frame % 16 == 0]  # one row per segment: instance level
    auc = roc_auc_score(seg.label, seg.score)  # reference: scikit-learn
    print(f"digits instance-level AUC {auc:.4f}")
    # common practice: a class unseen in training and separable from the others (the held-out
    # digit) is found near-perfectly by an instance scorer; 0.95 leaves room for weak labels
    assert auc >= 0.95, auc
