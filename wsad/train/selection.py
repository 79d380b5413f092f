"""Choosing how long to train when weak validation is small.

A run normally keeps the epoch of highest weak-validation video AUC. On a few
dozen held-out videos that curve is noisy, so the choice can land on an early
lucky epoch. The options, all chosen on training videos only:

- ``trainer.select_smooth=W``: select on the trailing mean of the last W epochs'
  weak-validation AUC, so one lucky epoch does not win.
- ``trainer.min_epoch=E``: no epoch before E is selected.
- ``trainer.weak_val_folds=K`` (K >= 2): the training groups are dealt into K
  folds; K trainings each hold one fold out, and the epoch count is chosen on
  their *mean* curve. The run then trains once more on all training videos for
  that many epochs (a refit).
- ``trainer.refit=true`` (with one held-out share): select the epoch count as
  usual, then retrain on all training videos for that many epochs.
"""
from __future__ import annotations

import copy
import math

import numpy as np
from omegaconf import DictConfig, open_dict

#: Held-out videos of each class below which weak validation is flagged as too small
#: to select on: with 10 anomalous and 10 normal videos the standard error of an AUC
#: of 0.8 is already 0.10 (:func:`auc_standard_error`), larger than the epoch-to-epoch
#: differences selection tries to resolve.
MIN_VIDEOS_PER_CLASS = 10


def auc_standard_error(auc: float, n_pos: int, n_neg: int) -> float:
    """The standard error of an AUC (Hanley & McNeil, Radiology 1982, eq. 1):
    ``sqrt((A(1-A) + (n_pos-1)(Q1-A^2) + (n_neg-1)(Q2-A^2)) / (n_pos n_neg))``,
    ``Q1 = A/(2-A)``, ``Q2 = 2A^2/(1+A)``."""
    a = float(auc)
    q1, q2 = a / (2 - a), 2 * a * a / (1 + a)
    return math.sqrt((a * (1 - a) + (n_pos - 1) * (q1 - a * a) + (n_neg - 1) * (q2 - a * a)) / (n_pos * n_neg))


def smoothed(curve: list[float], window: int) -> list[float]:
    """Trailing mean over the last ``window`` values (fewer at the start)."""
    out = []
    for i in range(len(curve)):
        out.append(float(np.mean(curve[max(0, i + 1 - window): i + 1])))
    return out


def pick_epoch(curve: list[float], window: int, min_epoch: int) -> tuple[int, float]:
    """The 1-based epoch of the highest smoothed value from ``min_epoch`` on (ties to
    the later epoch), and that value."""
    values = smoothed(curve, window)
    best, best_value = min_epoch, -math.inf
    for epoch in range(min_epoch, len(values) + 1):
        if values[epoch - 1] >= best_value:
            best, best_value = epoch, values[epoch - 1]
    return best, best_value


def too_small(store, val_videos: list[str]) -> str | None:
    """Why ``val_videos`` is too small to select on, or None."""
    labels = [store.label(v) for v in val_videos]
    n_pos, n_neg = sum(labels), len(labels) - sum(labels)
    n = min(n_pos, n_neg)
    if n < MIN_VIDEOS_PER_CLASS:
        return (f"weak validation holds {n_pos} anomalous and {n_neg} normal videos (< {MIN_VIDEOS_PER_CLASS} "
                f"of a class): near 0.8 its video AUC has a standard error of about "
                f"{auc_standard_error(0.8, max(1, n_pos), max(1, n_neg)):.2f}, "
                "so the selected epoch is close to chance; trainer.select=last was steadier on collections this "
                "small (docs: \"Small collections\")")
    return None


def chooses_epochs(cfg: DictConfig) -> bool:
    """Whether the run first chooses an epoch count, then refits on all training videos."""
    return int(cfg.trainer.weak_val_folds) > 1 or bool(cfg.trainer.refit)


def refit_config(cfg: DictConfig, epochs: int) -> DictConfig:
    """The config of the final training: all training videos, ``epochs`` epochs, the last epoch kept."""
    out = copy.deepcopy(cfg)
    with open_dict(out):
        out.trainer.epochs = int(epochs)
        out.trainer.weak_val_share = 0.0
        out.trainer.weak_val_folds = 1
        out.trainer.select = "last"
        out.trainer.min_epoch = 1
        out.trainer.select_smooth = 1
        out.trainer.refit = False
    return out
