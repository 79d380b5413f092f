"""The entry point of a run: resume or ablation, seeding, then one stage or two; the run's
warnings collected (into its result and ``summary.json``) and shown once at the end."""
from __future__ import annotations

import warnings

from omegaconf import DictConfig, OmegaConf

from ..checkpoint import load_checkpoint
from ..errors import WsadError
from ..publish import Sink
from ..tracking import resolve_uri
from .run import CAUGHT, RunResult, own, train_one_stage
from .self_training import train_two_stages
from .setup import apply_ablation, seed_everything
from .transfer import transfer_stores


def train(cfg: DictConfig, overrides: list[str] | None = None, sinks: list[Sink] | None = None) -> RunResult:
    """Train, evaluate and publish one run; returns its :class:`RunResult`.

    ``trainer.resume=RUN_ID`` continues an interrupted run from its last saved
    state, with the configuration it was started with. A config with a
    ``self_training`` block runs two stages in the one run (:mod:`.self_training`).
    ``sinks``: where else the run is published, after its folder and MLflow
    (:class:`wsad.publish.Sink`). wsad's own warnings (a small weak validation, skipped
    metrics) are shown once, at the end, and kept in the result and ``summary.json``."""
    with warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("default")
        token = CAUGHT.set(caught)
        try:
            res = _train(cfg, overrides, list(sinks or []))
        finally:
            CAUGHT.reset(token)
            others = [w for w in caught if not own(w)]
    for w in others:   # a library's warnings, as they would have been shown
        warnings.warn_explicit(w.message, w.category, w.filename, w.lineno)
    for message in res.warnings:
        warnings.warn(message, UserWarning, stacklevel=2)
    return res


def _train(cfg: DictConfig, overrides: list[str] | None, sinks: list[Sink]) -> RunResult:
    state = None
    if cfg.trainer.resume:
        cfg, state = resume_point(cfg)
    else:
        apply_ablation(cfg)
    seed_everything(int(cfg.seed), cfg.trainer.threads)
    transfer = transfer_stores(cfg)  # a wrong transfer store fails now, not after the training
    if cfg.get("self_training"):
        return train_two_stages(cfg, overrides, state, transfer, sinks)
    return train_one_stage(cfg, overrides, state, transfer, sinks)


def resume_point(cfg: DictConfig) -> tuple[DictConfig, dict]:
    """The saved state of run ``trainer.resume`` and the config it was started with."""
    from ..tracking.client import find_checkpoint

    run_id = str(cfg.trainer.resume)
    if not cfg.tracking.enabled:
        raise WsadError("trainer.resume needs tracking (the run id names the run to continue)")
    path = find_checkpoint(resolve_uri(str(cfg.tracking.uri)), run_id)
    state = load_checkpoint(path)
    saved = OmegaConf.create(state["config"])
    saved.trainer.resume = run_id
    saved.trainer.progress = cfg.trainer.progress
    saved.tracking = cfg.tracking
    return saved, state
