"""Across several stores (sites, scenarios, collections): how a variant does over all of them,
with the methods of Agarwal et al., NeurIPS 2021 ("Deep reinforcement learning at the edge of
the statistical precipice"): the interquartile mean of the runs' scores with a stratified
bootstrap interval (runs resampled within each store), the probability that one variant beats
another on a store drawn at random, and performance profiles (the share of runs scoring above
each threshold).

Scores come as ``{variant: array [runs, stores]}`` (seeds as runs, the same stores in the same
order for every variant).
"""
from __future__ import annotations

import numpy as np
from scipy import stats


def iqm(scores: np.ndarray) -> float:
    """The interquartile mean over every run and store: the mean of the middle 50% of scores
    (a 25% trimmed mean), robust to a store or run far off."""
    return float(stats.trim_mean(np.asarray(scores, float).ravel(), proportiontocut=0.25))


def probability_of_improvement(x: np.ndarray, y: np.ndarray) -> float:
    """P(X > Y) averaged over stores: per store the Mann-Whitney U of x's runs against y's,
    divided by n_x n_y (ties count 1/2)."""
    x, y = np.asarray(x, float), np.asarray(y, float)
    out = []
    for m in range(x.shape[1]):
        a, b = x[:, m][:, None], y[:, m][None, :]
        out.append(float(np.mean((a > b) + 0.5 * (a == b))))
    return float(np.mean(out))


def stratified_resamples(scores: dict[str, np.ndarray], reps: int, seed: int):
    """``reps`` resamples of every variant's runs, drawn within each store (the same draws for
    every variant with the same number of runs), as ``{variant: [reps, runs, stores]}``."""
    rng = np.random.default_rng(seed)
    shape = next(iter(scores.values())).shape
    idx = rng.integers(0, shape[0], size=(reps, shape[0], shape[1]))
    cols = np.arange(shape[1])[None, None, :]
    return {v: np.asarray(s, float)[idx, cols] for v, s in scores.items()}


def interval(scores: dict[str, np.ndarray], fn, reps: int = 2000, seed: int = 0,
             level: float = 0.95) -> dict[str, tuple[float, float, float]]:
    """Per variant: ``fn`` of its scores and the percentile interval of ``fn`` over stratified
    bootstrap resamples."""
    boot = stratified_resamples(scores, reps, seed)
    q = [(1 - level) / 2, (1 + level) / 2]
    out = {}
    for v, s in scores.items():
        values = np.array([fn(b) for b in boot[v]])
        out[v] = (float(fn(np.asarray(s, float))), *map(float, np.quantile(values, q)))
    return out


def improvement_interval(x: np.ndarray, y: np.ndarray, reps: int = 2000, seed: int = 0,
                         level: float = 0.95) -> tuple[float, float, float]:
    """P(X > Y) with a stratified bootstrap interval (each variant's runs resampled within
    each store, independently)."""
    rng = np.random.default_rng(seed)
    x, y = np.asarray(x, float), np.asarray(y, float)
    cols = np.arange(x.shape[1])[None, :]
    values = [probability_of_improvement(x[rng.integers(0, len(x), x.shape), cols],
                                         y[rng.integers(0, len(y), y.shape), cols]) for _ in range(reps)]
    lo, hi = np.quantile(values, [(1 - level) / 2, (1 + level) / 2])
    return probability_of_improvement(x, y), float(lo), float(hi)


def performance_profile(scores: np.ndarray, taus: np.ndarray) -> np.ndarray:
    """The share of all runs on all stores scoring above each threshold tau."""
    s = np.asarray(scores, float).ravel()
    return np.array([np.mean(s > t) for t in np.asarray(taus, float)])
