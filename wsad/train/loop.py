"""The training loop, top to bottom. Everything is built from the config; a
new bag construction, head, pooling or term plugs in through its YAML, not here."""
from __future__ import annotations

import copy
import tempfile
import time
import warnings
from contextlib import contextmanager
from dataclasses import dataclass
from pathlib import Path

import numpy as np
from omegaconf import DictConfig, OmegaConf, open_dict
from tqdm.auto import tqdm

from .. import tracking
from ..checkpoint import save_torch
from ..data.scoring import score_videos
from ..evaluate import grouped_bootstrap, roc_auc, video_scores
from ..evaluate.decision import choose_video_threshold, video_decision
from ..store import store_fingerprint
from .export import export, quiet_metrics
from .operating import alarm_metrics, transfer_metrics, transfer_stores
from .progress import Progress
from .resume import GracefulStop, TrainingInterrupted
from .selection import chooses_epochs, pick_epoch, refit_config, too_small
from .setup import Setup, build, seed_everything
from .step import step


@dataclass
class RunResult:
    """What a finished run gives back."""

    metrics: dict[str, float]   # test metrics of the selected model, its epoch and intervals
    history: list[dict]         # one row per epoch (also in scores/history.csv)
    out_dir: Path               # the artifacts
    run_id: str | None          # the MLflow run, None without tracking
    objective: float            # what a sweeper maximises: the selected epoch's weak-validation
                                # video AUC (held-out train cameras), never a test metric


def train_one_stage(cfg: DictConfig, overrides: list[str] | None, state: dict | None) -> RunResult:
    """One run of one recipe, from ``state`` when it resumes one (see :func:`wsad.train.train`)."""
    logged, chosen, small = cfg, None, None
    if state is None and chooses_epochs(cfg):  # choose the epoch count first, then refit on all
        epochs, value, curve, small = choose_epochs(cfg)
        chosen = {"weak_val_video_auc": value, "selection/epochs": float(epochs)}
        cfg = refit_config(cfg, epochs)
        seed_everything(int(cfg.seed), cfg.trainer.threads)
    s = build(cfg)
    if cfg.trainer.select == "weak_val":
        small = too_small(s.store, s.val_videos)
    prog = Progress.start(s) if state is None else Progress.restore(state, s)
    run = start_run(logged, overrides, s, cfg.trainer.get("resume"))
    resume_path = s.out_dir / "state" / "resume.pt"
    tracking.set_tag(run, "wsad.resume_checkpoint", str(resume_path.resolve()))
    if small:
        warnings.warn(small, stacklevel=2)
        tracking.set_tag(run, "wsad.weak_val_too_small", small)
    with closing_run(run, resume_path):
        if chosen:
            for epoch, value in enumerate(curve, 1):
                tracking.log_metrics(run, {"selection/mean_weak_val_video_auc": value}, step=epoch)
        fit(cfg, s, prog, run, resume_path)
        return finish(cfg, s, prog, run, chosen=chosen)


@contextmanager
def closing_run(run, resume_path: Path):
    """Close the MLflow run as KILLED (its resume checkpoint uploaded) when the
    training was stopped by a signal, as FAILED on any other error."""
    try:
        yield
    except TrainingInterrupted:
        tracking.log_state(run, resume_path)
        tracking.finish(run, None, status="KILLED")
        raise
    except tracking.TrackingUnavailable as err:  # nothing more can be logged: say how to finish
        saved = (f"with its training state saved in {resume_path}; when the server is back, finish it "
                 f"with trainer.resume={run.run_id}") if resume_path.is_file() else (
                 "before its first epoch ended; when the server is back, start it again")
        raise tracking.TrackingUnavailable(f"{err}; run {run.run_id} stopped {saved}") from None
    except BaseException:
        try:
            tracking.finish(run, None, status="FAILED")
        except tracking.TrackingUnavailable:
            pass   # the original error matters more than a server that is also away
        raise


#: Epoch rows are sent to the tracking store at most this often (and at the end, at a stop, on
#: resume): one commit per epoch cost ~13 ms, a tenth of a short epoch, measured here. The
#: resume state is still saved after every epoch, before the rows that follow it are sent.
LOG_EVERY_S = 2.0


def fit(cfg: DictConfig, s: Setup, prog: Progress, run, resume_path: Path, prefix: str = "",
        saved: tuple[DictConfig, dict] | None = None) -> None:
    """The epochs from ``prog.epoch`` on: train, evaluate, keep the selected model, log
    (metric names under ``prefix``; sent every :data:`LOG_EVERY_S`), save the resume state
    after every epoch. ``saved``: the config and extra fields the resume state records
    (default: ``cfg``)."""
    saved_cfg, extra = saved or (cfg, {})
    saved_yaml = OmegaConf.to_yaml(saved_cfg, resolve=True)   # what every resume state records
    if run is not None and prog.history:   # resumed: the epochs the state holds that the run lacks
        logged = tracking.logged_steps(run, prefix + "train_loss")
        tracking.log_rows(run, [_logged_row(r, prefix) for r in prog.history if r["epoch"] not in logged])
    pending, sent = [], time.monotonic()
    with GracefulStop() as stop:
        bar = tqdm(range(prog.epoch, s.epochs + 1), desc=f"train {prefix}{cfg.get('recipe_name', '')}".strip(),
                   unit="epoch", disable=not cfg.trainer.progress, initial=prog.epoch - 1, total=s.epochs)
        try:
            for epoch in bar:
                row = _train_epoch(cfg, s, prog, epoch, stop, resume_path, run, saved_yaml, extra)
                started = time.perf_counter()
                row.update(_evaluate_epoch(cfg, s, epoch))
                row["time/eval_s"] = time.perf_counter() - started
                prog.record(epoch, row, s, cfg.trainer)
                save_torch(resume_path, {**prog.snapshot(saved_yaml, s), **extra})  # before any row is sent
                pending.append(_logged_row(prog.history[-1], prefix))
                if epoch == s.epochs or time.monotonic() - sent >= LOG_EVERY_S:
                    tracking.log_rows(run, pending)
                    pending, sent = [], time.monotonic()
                bar.set_postfix(loss=f"{row['train_loss']:.4f}",
                                val=f"{row.get('weak_val_video_auc', float('nan')):.3f}",
                                auc=f"{row.get('frame_auc', float('nan')):.3f}")
        except TrainingInterrupted:
            tracking.log_rows(run, pending)   # the epochs that ended before the stop
            raise


def _logged_row(row: dict, prefix: str) -> tuple[int, int, dict]:
    """A history row as :func:`wsad.tracking.log_rows` takes it (the epoch is the step)."""
    values = {prefix + k: v for k, v in row.items() if k != "epoch"}
    return row["epoch"], int(time.time() * 1000), values


def _train_epoch(cfg, s: Setup, prog: Progress, epoch: int, stop: GracefulStop, resume_path: Path,
                 run, saved_yaml: str, extra: dict) -> dict:
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
            save_torch(resume_path, {**prog.snapshot(saved_yaml, s, epoch, bi + 1), **extra})
            raise TrainingInterrupted(
                f"stopped by signal {stop.signum} in epoch {epoch} after batch {bi + 1}; "
                f"resume with trainer.resume={run.run_id if run else '<run id>'}", stop.signum)
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
    row, cache = {}, s.loader.cache  # one budget (data.cache_mb) for training bags and eval arrays
    if s.val_videos:
        vs = score_videos(s.model, s.store, s.val_videos, s.std, s.bags.chunks, cache=cache)
        row["weak_val_video_auc"] = roc_auc([s.store.label(v) for v in s.val_videos],
                                            [x.max() for x in vs.values()], "weak validation video AUC")
    if epoch % int(cfg.trainer.eval_every) == 0 or epoch == s.epochs:
        row.update(quiet_metrics(video_scores(s.store, score_videos(
            s.model, s.store, s.test_videos, s.std, s.bags.chunks, cache=cache))))
    return row


def final_metrics(cfg, s: Setup, prog: Progress, write: bool = True) -> tuple[dict, list]:
    """The selected model's test metrics, intervals and video decision (the model is left
    holding the selected state), and its test scores. ``write``: also write the operating
    point's files (alarms per camera, DET points, transfer scores) into the run's folder."""
    s.model.load_state_dict(prog.best_state)
    test = video_scores(s.store, score_videos(s.model, s.store, s.test_videos, s.std, s.bags.chunks))
    final = quiet_metrics(test)
    if int(cfg.trainer.bootstrap) > 0 and "frame_auc" in final:
        final.update(grouped_bootstrap(test, int(cfg.trainer.bootstrap), seed=int(cfg.seed),
                                       by=cfg.trainer.bootstrap_by, interval=cfg.trainer.get("interval", "clustered")))
    held = score_videos(s.model, s.store, s.val_videos or s.fit_videos, s.std, s.bags.chunks)
    final.update(_video_decision(s, held, test))
    alarms, threshold = alarm_metrics(cfg, s, held, test, write)
    final.update(alarms)
    final.update(transfer_metrics(cfg, s, transfer_stores(cfg), threshold, write))
    final["selected_epoch"] = prog.best_epoch
    selected = prog.history[prog.best_epoch - 1]
    if "weak_val_video_auc" in selected:
        final["weak_val_video_auc"] = selected["weak_val_video_auc"]
    return final, test


def finish(cfg, s: Setup, prog: Progress, run, saved_cfg: DictConfig | None = None,
           chosen: dict | None = None) -> RunResult:
    """The selected model: final metrics logged, artifacts written, the run closed.
    ``chosen``: what an epoch-count choice before a refit measured (logged with the rest)."""
    final, test = final_metrics(cfg, s, prog)
    final.update(chosen or {})
    tracking.log_metrics(run, final, step=s.epochs)
    export(s.out_dir, saved_cfg or cfg, s, test, prog.history)
    tracking.finish(run, s.out_dir)
    objective = float(final.get("weak_val_video_auc", -prog.history[-1]["train_loss"]))
    return RunResult(final, prog.history, s.out_dir, run.run_id if run else None, objective)


def _video_decision(s: Setup, held: dict, test) -> dict:
    """``video_threshold`` chosen on the ``held`` scores of the weak-validation videos (the fit
    videos when none are held out), and the test split's video accuracy at it. No test label
    takes part in the choice."""
    threshold = choose_video_threshold([x.max() for x in held.values()], [s.store.label(v) for v in held])
    return {"video_threshold": threshold, **video_decision(test, threshold)}


def choose_epochs(cfg: DictConfig) -> tuple[int, float, list[float], str | None]:
    """Train once per fold (or once on the usual held-out share), silently and without
    tracking, and choose the epoch count on the mean weak-validation curve.
    Returns the epochs, the selected smoothed value, the mean curve, and why the
    held-out videos are too small to select on (None when they are not)."""
    folds = int(cfg.trainer.get("weak_val_folds", 1))
    curves, small = [], None
    for fold in range(folds):
        sub = copy.deepcopy(cfg)
        with open_dict(sub):
            sub.trainer.weak_val_fold = fold
            sub.trainer.eval_every = 10 ** 9  # test metrics are not needed to choose
            sub.trainer.progress = False
            sub.trainer.out_dir = tempfile.mkdtemp(prefix="wsad-fold-")
        seed_everything(int(cfg.seed), cfg.trainer.threads)
        s = build(sub)
        small = small or too_small(s.store, s.val_videos)
        prog = Progress.start(s)
        fit(sub, s, prog, None, Path(sub.trainer.out_dir) / "resume.pt", prefix=f"fold {fold + 1}/{folds} ")
        curves.append([r["weak_val_video_auc"] for r in prog.history])
    mean = list(np.mean(np.array(curves), axis=0))
    epochs, value = pick_epoch(mean, int(cfg.trainer.get("select_smooth", 1)), int(cfg.trainer.get("min_epoch", 1)))
    return epochs, value, [float(x) for x in mean], small


def start_run(cfg: DictConfig, overrides, s: Setup, resume_id: str | None = None):
    if not cfg.tracking.enabled:
        return None
    if resume_id:
        return tracking.reopen_run(str(cfg.tracking.uri), str(resume_id))
    return tracking.start_run(cfg, overrides, store_fingerprint(s.store.root))
