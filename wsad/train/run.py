"""One run, in the order its data flows: build -> fit -> score -> evaluate -> publish.

:func:`conclude` is the end of every run: the selected model becomes a scorer, the scorer
scores the test split, the held-out training videos and the transfer stores, :func:`evaluate`
turns the scores into an :class:`~wsad.evaluate.Evaluation`, and the sinks publish it.
"""
from __future__ import annotations

import warnings
from contextlib import contextmanager
from contextvars import ContextVar
from pathlib import Path

from omegaconf import DictConfig

from ..data.scorer import Scorer
from ..evaluate import Evaluation, EvaluationSettings, evaluate, scored
from ..publish import FolderSink, Outcome, Run, Sink, Sinks
from ..store import FeatureStore, store_fingerprint
from ..timeline import mark
from ..tracking import TrackingUnavailable
from .loop import choose_epochs, fit
from .members import resolve_members, train_members
from .progress import Progress
from .resume import TrainingInterrupted
from .selection import chooses_epochs, refit_config, too_small
from .setup import Setup, build, draws_plots, holdout_folds, seed_everything

_PACKAGE = str(Path(__file__).resolve().parent.parent)
#: The warnings of the run in progress (:func:`wsad.train.train` collects them).
CAUGHT: ContextVar[list | None] = ContextVar("wsad_run_warnings", default=None)


def own(w: warnings.WarningMessage) -> bool:
    """A warning wsad raised for the user (not a library's)."""
    return w.category is UserWarning and str(w.filename).startswith(_PACKAGE)


def run_warnings(extra: list[str]) -> list[str]:
    """The run's own warnings so far, then ``extra``, each once."""
    caught = CAUGHT.get() or []
    return list(dict.fromkeys([str(w.message) for w in caught if own(w)] + list(extra)))


#: What a finished run gives back: a :class:`wsad.publish.Run` (metrics, history, scores, figures).
RunResult = Run


def open_sinks(cfg: DictConfig, overrides, s: Setup, extra: list[Sink] | None = None) -> Sinks:
    """The run folder, MLflow when tracking is on (a new run, or the one being resumed), then ``extra``."""
    sinks: list[Sink] = [FolderSink()]
    if cfg.tracking.enabled:
        from ..publish.tracked import TrackingSink

        sinks.append(TrackingSink(cfg, overrides, str(s.store.root), store_fingerprint(s.store.root),
                                  cfg.trainer.resume))
    return Sinks(sinks + list(extra or []))


def train_one_stage(cfg: DictConfig, overrides: list[str] | None, state: dict | None,
                    transfer: list[tuple[str, FeatureStore]], extra: list[Sink] | None = None) -> RunResult:
    """One run of one recipe, from ``state`` when it resumes one (see :func:`wsad.train.train`)."""
    logged, chosen, small = cfg, None, None
    if state is None and chooses_epochs(cfg):  # choose the epoch count first, then refit on all
        epochs, value, curve, small = choose_epochs(cfg)
        chosen = {"weak_val_video_auc": value, "selection/epochs": float(epochs)}
        cfg = refit_config(cfg, epochs)
        seed_everything(int(cfg.seed), cfg.trainer.threads)
    s = build(cfg)
    mark("build")
    several = resolve_members(cfg, s.store)
    if holdout_folds(cfg) > 1:   # the first member holds out the first fold
        seed_everything(int(cfg.seed), cfg.trainer.threads)
        s = build(cfg)
    if cfg.trainer.select == "weak_val":
        small = too_small(s.store, s.val_videos)
    prog = Progress.start(s) if state is None else Progress.restore(state, s)
    sinks = open_sinks(logged, overrides, s, extra)
    resume_path = s.out_dir / "state" / "resume.pt"
    sinks.tag("wsad.resume_checkpoint", str(resume_path.resolve()))
    if small:
        warnings.warn(small, stacklevel=2)
        sinks.tag("wsad.weak_val_too_small", small)
    if several:
        warnings.warn(several, stacklevel=2)
    sinks.tag("wsad.members", str(cfg.trainer.members))
    mark("tracking")
    with closing(sinks, resume_path):
        if chosen:
            sinks.log_rows([(epoch, None, {"selection/mean_weak_val_video_auc": value})
                            for epoch, value in enumerate(curve, 1)])
        # matplotlib is not imported in a background thread while the epochs run: it reads its style
        # sheets under warnings.catch_warnings(record=True), which is process-wide, and on a busy
        # machine it took this run's own warnings and logged them as its own
        fit(cfg, s, prog, sinks, resume_path)
        mark("epochs")
        s.members, s.members_heldout = train_members(cfg, int(cfg.trainer.members))
        return conclude(cfg, s, prog, sinks, transfer, chosen=chosen)


@contextmanager
def closing(sinks: Sinks, resume_path: Path):
    """Close the run as KILLED (its resume state uploaded) when the training was stopped by a
    signal, as FAILED on any other error."""
    try:
        yield
    except TrainingInterrupted:
        sinks.close("KILLED", resume_path)
        raise
    except TrackingUnavailable as err:  # nothing more can be logged: say how to finish
        if sinks.run_id is None:   # the run's start in MLflow itself failed (it runs beside the training)
            raise TrackingUnavailable(f"{err}; the run could not start there; when the server is back, "
                                      "start it again") from None
        saved = (f"with its training state saved in {resume_path}; when the server is back, finish it "
                 f"with trainer.resume={sinks.run_id}") if resume_path.is_file() else (
                 "before its first epoch ended; when the server is back, start it again")
        raise TrackingUnavailable(f"{err}; run {sinks.run_id} stopped {saved}") from None
    except BaseException:
        try:
            sinks.close("FAILED")
        except TrackingUnavailable:
            pass   # the original error matters more than a server that is also away
        raise


def score_and_evaluate(cfg: DictConfig, s: Setup, prog: Progress,
                       transfer: list[tuple[str, FeatureStore]]) -> Evaluation:
    """Score: the selected model on the test split, the held-out training videos (the fitted
    ones when none are held out) and each transfer store's test split. Evaluate: those scores."""
    scorer = s.scorer(prog.best_state)
    test = scored(s.store, scorer(s.store, s.test_videos))
    if s.members_heldout:   # each training video scored by the one member that held it out
        parts = zip([s.model, *s.members], [s.val_videos, *s.members_heldout])
        heldout = scored(s.store, {v: x for model, videos in parts
                                   for v, x in Scorer(model, s.std, s.bags.chunks)(s.store, videos).items()}).videos
    else:
        heldout = scored(s.store, scorer(s.store, s.val_videos or s.fit_videos)).videos
    other = {name: (str(store.root), scored(store, scorer(store, store.videos("test")))) for name, store in transfer}
    settings = EvaluationSettings.from_config(cfg, heldout_fitted=not s.val_videos)
    return evaluate(test, heldout, settings, other)


def conclude(cfg: DictConfig, s: Setup, prog: Progress, sinks: Sinks, transfer: list[tuple[str, FeatureStore]],
             saved_cfg: DictConfig | None = None, chosen: dict | None = None) -> RunResult:
    """Score, evaluate and publish the selected model; close the run. ``chosen``: what an
    epoch-count choice before a refit measured (logged with the rest)."""
    ev = score_and_evaluate(cfg, s, prog, transfer)
    mark("evaluate")
    final = {**ev.metrics, **selection_metrics(prog), **(chosen or {})}
    said = run_warnings(ev.warnings)
    outcome = Outcome(str(cfg.get("recipe_name", "model")), saved_cfg or cfg, ev, final, prog.history, s.out_dir,
                      s.epochs, s.scorer(), s.store.dim, store_fingerprint(s.store.root), draws_plots(cfg), said)
    sinks.publish(outcome)
    mark("publish")
    sinks.close("FINISHED")
    mark("close")
    objective = float(final.get("weak_val_video_auc", -prog.history[-1]["train_loss"]))
    return Run(s.out_dir, final, list(prog.history), sinks.run_id, objective, ev, said)


def selection_metrics(prog: Progress) -> dict[str, float]:
    """The selected epoch and its weak-validation value."""
    out = {"selected_epoch": prog.best_epoch}
    selected = prog.history[prog.best_epoch - 1]
    if "weak_val_video_auc" in selected:
        out["weak_val_video_auc"] = selected["weak_val_video_auc"]
    return out
