"""The detection error trade-off (DET curve; Martin et al., Eurospeech 1997): the miss
probability against the false-alarm probability over all thresholds, drawn on
normal-deviate (probit) axes, where equal-variance Gaussian scores give a straight line."""
from __future__ import annotations

import numpy as np

from ..errors import WsadError

#: A run's DET points (artifact paths): frames at every distinct score, events on a threshold grid.
DET_FRAMES = "scores/det_frames.csv"
DET_EVENTS = "scores/det_events.csv"


def det_points(scores, labels) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """False-alarm rate, miss rate and threshold at every distinct score (a frame is called
    anomalous when its score >= the threshold), thresholds increasing:
    ``fpr(t) = #{normal >= t} / #normal``, ``fnr(t) = #{anomalous < t} / #anomalous``."""
    s = np.asarray(scores, dtype=np.float64)
    y = np.asarray(labels).astype(bool)
    if y.all() or not y.any():
        raise WsadError("a DET curve needs anomalous and normal frames")
    thresholds = np.unique(s)
    neg, pos = np.sort(s[~y]), np.sort(s[y])
    fpr = (len(neg) - np.searchsorted(neg, thresholds, side="left")) / len(neg)
    fnr = np.searchsorted(pos, thresholds, side="left") / len(pos)
    return fpr, fnr, thresholds
