"""The entry point of a run: resume or ablation, seeding, then one stage or two."""
from __future__ import annotations

from omegaconf import DictConfig, OmegaConf

from .. import tracking
from ..checkpoint import load_checkpoint
from ..errors import WsadError
from .loop import RunResult, train_one_stage
from .operating import transfer_stores
from .resume import find_checkpoint
from .self_training import train_two_stages
from .setup import apply_ablation, seed_everything


def train(cfg: DictConfig, overrides: list[str] | None = None) -> RunResult:
    """Train, evaluate and log one run.

    ``trainer.resume=RUN_ID`` continues an interrupted run from its last saved
    state, with the configuration it was started with. A config with a
    ``self_training`` block runs two stages in the one run (:mod:`.self_training`)."""
    state = None
    if cfg.trainer.get("resume"):
        cfg, state = resume_point(cfg)
    else:
        apply_ablation(cfg)
    seed_everything(int(cfg.seed), cfg.trainer.threads)
    transfer_stores(cfg)  # a wrong transfer store fails now, not after the training
    if cfg.get("self_training"):
        return train_two_stages(cfg, overrides, state)
    return train_one_stage(cfg, overrides, state)


def resume_point(cfg: DictConfig) -> tuple[DictConfig, dict]:
    """The saved state of run ``trainer.resume`` and the config it was started with."""
    run_id = str(cfg.trainer.resume)
    if not cfg.tracking.enabled:
        raise WsadError("trainer.resume needs tracking (the run id names the run to continue)")
    path = find_checkpoint(run_id, tracking.resolve_uri(str(cfg.tracking.uri)))
    state = load_checkpoint(path)
    saved = OmegaConf.create(state["config"])
    saved.trainer.resume = run_id
    saved.trainer.progress = cfg.trainer.progress
    saved.tracking = cfg.tracking
    return saved, state


