"""Classic multiple-instance benchmarks as feature stores.

The CSVs of the classic MIL benchmarks (Musk, Elephant/Fox/Tiger, ...) hold one
instance per row: ``label, bag, feature_1, ..., feature_D``. A bag becomes a
"video" whose segments are its instances (in file order), its label the video
label; there is no frame-level truth, so such a store measures the video-level
decision (``video_accuracy`` at ``video_threshold``) and ``video_auc``.
"""
from __future__ import annotations

from pathlib import Path

import numpy as np
import pandas as pd

from ..errors import WsadError
from .index import build_store


def read_bags(csv: str | Path) -> tuple[dict[str, np.ndarray], dict[str, int]]:
    """``{bag: [n_instances, D] float32}`` and ``{bag: 0|1}`` from a classic MIL CSV."""
    table = pd.read_csv(csv, header=None)
    if table.shape[1] < 3:
        raise WsadError(f"{csv}: expected label, bag, features... per row, found {table.shape[1]} columns")
    labels_col, bag_col = table[0], table[1]
    if not set(labels_col.unique()) <= {0, 1}:
        raise WsadError(f"{csv}: the first column must be the 0/1 bag label")
    feats, labels = {}, {}
    for bag, rows in table.groupby(bag_col, sort=True):
        if rows[0].nunique() != 1:
            raise WsadError(f"{csv}: bag {bag} has rows with different labels")
        name = f"bag_{int(bag):04d}"
        feats[name] = rows.iloc[:, 2:].to_numpy(np.float32)
        labels[name] = int(rows[0].iloc[0])
    return feats, labels


def store_from_bags(feats: dict[str, np.ndarray], labels: dict[str, int], test: set[str],
                    out: str | Path, description: str = "") -> Path:
    """A store at ``out`` with the bags in ``test`` as its test split, the rest as train.
    Each bag is its own group (the bags are independent)."""
    out = Path(out)
    arrays = out.parent / f"{out.name}_arrays"
    arrays.mkdir(parents=True, exist_ok=True)
    rows = []
    for name, x in feats.items():
        np.save(arrays / f"{name}.npy", x)
        rows.append({"video": name, "label": labels[name], "split": "test" if name in test else "train"})
    pd.DataFrame(rows).to_csv(out.parent / f"{out.name}_labels.csv", index=False)
    return build_store(arrays, out.parent / f"{out.name}_labels.csv", out, copy=True, description=description)
