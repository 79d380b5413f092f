"""The simplest thing a user could do instead of MIL, as a reference row: each video (bag) as the
concatenation of its segments' mean, maximum and minimum features, standardised, and a
logistic regression (C = 0.1) on the training videos' labels (common practice; the "bag
embedding" baseline of the MIL literature, from memory). Its video-level AUC on the test split
says at once whether MIL earns its cost on a user's data."""
from __future__ import annotations

import numpy as np

from ..store.format import FeatureStore
from .metrics import roc_auc


def bag_embedding(x: np.ndarray) -> np.ndarray:
    """[T, D] segment features -> [3 D]: mean, max and min over the segments."""
    x = np.asarray(x, dtype=np.float64)
    return np.concatenate([x.mean(axis=0), x.max(axis=0), x.min(axis=0)])


def embeddings(store: FeatureStore, videos: list[str]) -> np.ndarray:
    """Each video's bag embedding (its views averaged first)."""
    return np.stack([bag_embedding(store.views(v).mean(axis=0)) for v in videos])


def baseline_model(c: float = 0.1, kernel: str = "linear"):
    """The unfitted classifier on bag embeddings: standardisation, then a logistic regression
    (``kernel="linear"``, C = ``c``) or an RBF SVM (``kernel="rbf"``, C = ``c``)."""
    from sklearn.linear_model import LogisticRegression
    from sklearn.pipeline import make_pipeline
    from sklearn.preprocessing import StandardScaler
    from sklearn.svm import SVC

    model = LogisticRegression(C=c, max_iter=5000) if kernel == "linear" else SVC(C=c, kernel="rbf")
    return make_pipeline(StandardScaler(), model)


def baseline_scores(store: FeatureStore, c: float = 0.1, kernel: str = "linear") -> dict[str, float]:
    """The baseline's score of each test video, fitted on every training video
    (:func:`baseline_model`)."""
    train, test = store.videos("train"), store.videos("test")
    y = np.array([store.label(v) for v in train])
    clf = baseline_model(c, kernel).fit(embeddings(store, train), y)
    x = embeddings(store, test)
    s = clf.decision_function(x)
    return dict(zip(test, map(float, s)))


def baseline_video_auc(store: FeatureStore) -> float | None:
    """The baseline's video AUC on the test split (None without both labels in each split)."""
    for split in ("train", "test"):
        if len({store.label(v) for v in store.videos(split)}) < 2:
            return None
    scores = baseline_scores(store)
    return roc_auc([store.label(v) for v in scores], list(scores.values()), "baseline video AUC")
