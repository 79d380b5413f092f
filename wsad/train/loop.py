"""The training loop, top to bottom: epochs of steps, each epoch evaluated on weak validation
(and, for the learning curves only, on test), the selected model kept, the resume state saved.
Everything is built from the config; a new bag construction, head, pooling or term plugs in
through its YAML, not here. What happens after the last epoch is in :mod:`.run`."""
from __future__ import annotations

import copy
import tempfile
import time
import warnings
from pathlib import Path

import numpy as np
from omegaconf import DictConfig, OmegaConf, open_dict
from tqdm.auto import tqdm

from ..checkpoint import save_torch
from ..evaluate import compute_metrics, roc_auc, video_scores
from ..publish import Sink, Sinks
from .progress import Progress
from .resume import GracefulStop, TrainingInterrupted
from .selection import pick_epoch, too_small
from .setup import Setup, build, seed_everything
from .step import step

#: Epoch rows are sent to the tracking store at most this often (and at the end, at a stop, on
#: resume): one commit per epoch cost ~13 ms, a tenth of a short epoch, measured here. The
#: resume state is still saved after every epoch, before the rows that follow it are sent.
LOG_EVERY_S = 2.0


def fit(cfg: DictConfig, s: Setup, prog: Progress, sinks: Sink, resume_path: Path | None, prefix: str = "",
        saved: tuple[DictConfig, dict] | None = None) -> None:
    """The epochs from ``prog.epoch`` on: train, evaluate, keep the selected model, log
    (metric names under ``prefix``; sent every :data:`LOG_EVERY_S`), save the resume state
    after every epoch (not when ``resume_path`` is None: a fold's or a member's training is
    redone, not resumed). ``saved``: the config and extra fields the resume state records
    (default: ``cfg``)."""
    saved_cfg, extra = saved or (cfg, {})
    saved_yaml = OmegaConf.to_yaml(saved_cfg, resolve=True)   # what every resume state records
    if prog.history and sinks.run_id:   # resumed: the epochs the state holds that the run lacks
        logged = sinks.logged_steps(prefix + "train_loss")
        sinks.log_rows([_logged_row(r, prefix) for r in prog.history if r["epoch"] not in logged])
    pending, sent = [], time.monotonic()
    with GracefulStop() as stop:
        bar = tqdm(range(prog.epoch, s.epochs + 1), desc=f"train {prefix}{cfg.get('recipe_name', '')}".strip(),
                   unit="epoch", disable=not cfg.trainer.progress, initial=prog.epoch - 1, total=s.epochs)
        try:
            for epoch in bar:
                row = _train_epoch(cfg, s, prog, epoch, stop, resume_path, sinks, saved_yaml, extra)
                started = time.perf_counter()
                row.update(_evaluate_epoch(cfg, s, epoch))
                row["time/eval_s"] = time.perf_counter() - started
                prog.record(epoch, row, s, cfg.trainer)
                if resume_path is not None:   # before any row is sent
                    save_torch(resume_path, {**prog.snapshot(saved_yaml, s), **extra})
                pending.append(_logged_row(prog.history[-1], prefix))
                if epoch == s.epochs or time.monotonic() - sent >= LOG_EVERY_S:
                    sinks.log_rows(pending)
                    pending, sent = [], time.monotonic()
                # the loss and weak validation only: test curves are for after the run (MLflow,
                # scores/history.csv), not for stopping by eye on test labels
                shown = {"loss": f"{row['train_loss']:.4f}"}
                if "weak_val_video_auc" in row:
                    shown["weak_val"] = f"{row['weak_val_video_auc']:.3f}"
                bar.set_postfix(shown)
        except TrainingInterrupted:
            sinks.log_rows(pending)   # the epochs that ended before the stop
            raise


def _logged_row(row: dict, prefix: str) -> tuple[int, int, dict]:
    """A history row as a sink takes it (the epoch is the step)."""
    values = {prefix + k: v for k, v in row.items() if k != "epoch"}
    return row["epoch"], int(time.time() * 1000), values


def _train_epoch(cfg, s: Setup, prog: Progress, epoch: int, stop: GracefulStop, resume_path: Path | None,
                 sinks: Sink, saved_yaml: str, extra: dict) -> dict:
    """One pass over the epoch's batches (from ``prog.batch`` after a stop mid-epoch)."""
    s.model.train()
    started, segments = time.perf_counter(), 0
    batches = s.bags.batches(s.items, epoch, int(cfg.seed))
    for bi in range(prog.batch if epoch == prog.epoch else 0, len(batches)):
        batch = s.loader.collate([s.items[i] for i in batches[bi]])
        segments += int(batch.mask.sum())
        res = step(s.model, s.pooling, s.terms, batch, s.optimizer, cfg.trainer.grad_clip)
        prog.add_step(res.loss, res.terms)
        if stop.requested:  # the step is done: save where we are, then stop
            if resume_path is not None:
                save_torch(resume_path, {**prog.snapshot(saved_yaml, s, epoch, bi + 1), **extra})
            raise TrainingInterrupted(
                f"stopped by signal {stop.signum} in epoch {epoch} after batch {bi + 1}; "
                f"resume with trainer.resume={sinks.run_id or '<run id>'}", stop.signum)
    if s.schedule is not None:
        s.schedule.step()
    row = prog.close_epoch(s)
    # what an epoch costs: the benchmarks and sweep planning read these
    row.update({"time/train_s": time.perf_counter() - started, "train_segments": segments,
                "train_batches": len(batches)})
    return row


def _evaluate_epoch(cfg, s: Setup, epoch: int) -> dict:
    """Weak validation (video labels of held-out train cameras) every epoch; the
    test metrics every ``trainer.eval_every`` epochs, for the learning curves."""
    row, cache, scorer = {}, s.loader.cache, s.scorer()  # one budget (data.cache_mb) for bags and eval arrays
    if s.val_videos:
        vs = scorer(s.store, s.val_videos, cache=cache)
        row["weak_val_video_auc"] = roc_auc([s.store.label(v) for v in s.val_videos],
                                            [x.max() for x in vs.values()], "weak validation video AUC")
    if epoch % int(cfg.trainer.eval_every) == 0 or epoch == s.epochs:
        with warnings.catch_warnings():
            warnings.simplefilter("ignore")   # missing events: the final evaluation says so once
            row.update(compute_metrics(video_scores(s.store, scorer(s.store, s.test_videos, cache=cache))))
    return row


def choose_epochs(cfg: DictConfig) -> tuple[int, float, list[float], str | None]:
    """Train once per fold (or once on the usual held-out share), silently and without
    tracking, and choose the epoch count on the mean weak-validation curve.
    Returns the epochs, the selected smoothed value, the mean curve, and why the
    held-out videos are too small to select on (None when they are not)."""
    folds = int(cfg.trainer.weak_val_folds)
    curves, small = [], None
    for fold in range(folds):
        sub = copy.deepcopy(cfg)
        with open_dict(sub):
            sub.trainer.weak_val_fold = fold
            sub.trainer.eval_every = 10 ** 9  # test metrics are not needed to choose
            sub.trainer.progress = False
            sub.trainer.out_dir = tempfile.gettempdir()   # nothing is written: no resume state, no files
        seed_everything(int(cfg.seed), cfg.trainer.threads)
        s = build(sub)
        small = small or too_small(s.store, s.val_videos)
        prog = Progress.start(s)
        fit(sub, s, prog, Sinks(), None, prefix=f"fold {fold + 1}/{folds} ")
        curves.append([r["weak_val_video_auc"] for r in prog.history])
    mean = list(np.mean(np.array(curves), axis=0))
    epochs, value = pick_epoch(mean, int(cfg.trainer.select_smooth), int(cfg.trainer.min_epoch))
    return epochs, value, [float(x) for x in mean], small
