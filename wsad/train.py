"""The training loop, top to bottom. Everything is built from the config; a
new bag construction, head or term plugs in through its YAML, not here."""
from __future__ import annotations

import math
import os
import random
import tempfile
import time
import warnings
from dataclasses import dataclass
from pathlib import Path

import numpy as np
import pandas as pd
import torch
from omegaconf import DictConfig, OmegaConf
from tqdm.auto import tqdm

from . import tracking
from .bags.base import ArrayCache, BagLoader, Standardizer
from .errors import WsadError
from .evaluate import METRICS, compute_metrics, frame_table, grouped_bootstrap, roc_auc
from .model_io import build_component, build_head, load_checkpoint, save_checkpoint, score_videos, video_scores
from .plots import roc_plot, timeline_plot
from .pooling import pool
from .resume import (GracefulStop, TrainingInterrupted, find_checkpoint, rng_state, save_state,
                     set_rng_state)
from .store import FeatureStore, check_store, store_fingerprint
from .terms.base import TermInputs


def seed_everything(seed: int, threads: int | None) -> None:
    random.seed(seed)
    np.random.seed(seed)
    torch.manual_seed(seed)
    torch.use_deterministic_algorithms(True)
    if threads is None:  # one thread per job when a sweep runs jobs side by side
        threads = 1 if _in_multirun() else (os.cpu_count() or 1)
    torch.set_num_threads(max(1, int(threads)))


def apply_ablation(cfg: DictConfig) -> None:
    """ablation.toggle=<term>: off if the recipe uses it, on at ablation.on_weight if not."""
    name = cfg.get("ablation", {}).get("toggle", "none")
    if name in (None, "none"):
        return
    if name not in cfg.objective:
        raise WsadError(f"ablation.toggle={name!r} is not a term; known: none, "
                        f"{', '.join(cfg.objective.keys())}")
    on = float(cfg.ablation.on_weight.get(name, 1.0))
    cfg.objective[name] = 0.0 if float(cfg.objective[name]) > 0 else on


def weak_validation_split(store: FeatureStore, share: float) -> tuple[list[str], list[str]]:
    """Hold out whole train groups (cameras) for weak validation: video AUC on
    video labels, never test labels. Fixed by the data, not the seed, so every
    variant and seed is selected on the same videos."""
    train = store.videos("train")
    if share <= 0:
        return train, []
    m = store.manifest[store.manifest["split"] == "train"]
    groups = sorted(m["group"].unique())
    rng = np.random.default_rng(12345)
    held: list[str] = []
    for g in rng.permutation(groups):
        if len(held) >= share * len(groups):
            break
        held.append(g)
    val = list(m[m["group"].isin(held)]["video"])
    fit = list(m[~m["group"].isin(held)]["video"])
    labels_val = {store.label(v) for v in val}
    labels_fit = {store.label(v) for v in fit}
    if labels_val != {0, 1} or labels_fit != {0, 1}:
        # too few groups to hold some out by camera: hold out videos instead, with a warning
        warnings.warn("weak validation could not be split by group with both labels on each "
                      "side; holding out videos instead (cameras may then be shared)", stacklevel=2)
        idx = rng.permutation(len(train))
        n = max(2, int(round(share * len(train))))
        val = [train[i] for i in idx[:n]]
        fit = [train[i] for i in idx[n:]]
    return fit, val


def build_terms(cfg: DictConfig) -> dict[str, tuple[float, object]]:
    terms = {}
    for name, weight in cfg.objective.items():
        weight = float(weight)
        if weight < 0:
            raise WsadError(f"objective.{name}={weight}: weights must be >= 0 (0 disables a term)")
        if weight == 0:
            continue
        if name not in cfg.terms:
            raise WsadError(f"objective.{name} has no settings in terms/; known terms: "
                            f"{', '.join(cfg.terms.keys())}")
        terms[name] = (weight, build_component(cfg.terms[name], f"term {name}"))
    if not terms:
        raise WsadError("every objective weight is 0; enable a term, e.g. objective.bag_bce=1")
    return terms


@dataclass
class Setup:
    """Everything a run is built from (made by :func:`build` from the config)."""

    store: FeatureStore
    fit_videos: list[str]
    val_videos: list[str]
    test_videos: list[str]
    std: Standardizer
    bags: object
    pooling: str
    k: int | None
    items: list
    loader: BagLoader
    model: torch.nn.Module
    terms: dict
    optimizer: torch.optim.Optimizer
    schedule: object
    epochs: int
    out_dir: Path


def build(cfg: DictConfig) -> Setup:
    """Check the store, split it, and build every component from the config."""
    errors = [p for p in check_store(cfg.data.root) if p.severity == "error"]
    if errors:
        raise WsadError(f"the store {cfg.data.root} has {len(errors)} problem(s), first: {errors[0]}; "
                        f"run wsad-check {cfg.data.root}")
    store = FeatureStore(cfg.data.root, crops=cfg.data.crops)
    fit_videos, val_videos = weak_validation_split(store, float(cfg.trainer.weak_val_share))
    if cfg.trainer.select not in ("last", "weak_val"):
        raise WsadError(f"trainer.select={cfg.trainer.select!r}; use last or weak_val")
    if cfg.trainer.select == "weak_val" and not val_videos:
        raise WsadError("trainer.select=weak_val needs trainer.weak_val_share > 0")
    epochs = int(cfg.trainer.epochs)
    if epochs < 1:
        raise WsadError(f"trainer.epochs={epochs}; train for at least 1 epoch")
    std = Standardizer.fit(store, fit_videos) if cfg.data.standardize else Standardizer()
    bag_cfg = OmegaConf.to_container(cfg.bags, resolve=True)
    pooling, k = bag_cfg.pop("pooling"), bag_cfg.pop("k", None)
    bags = build_component(bag_cfg, "bags")
    model = build_head(cfg, store.dim)
    optimizer = build_component(cfg.optim, "optim", params=model.parameters())
    schedule = None
    if cfg.trainer.schedule == "cosine":
        schedule = torch.optim.lr_scheduler.CosineAnnealingLR(optimizer, T_max=epochs)
    elif cfg.trainer.schedule is not None:
        raise WsadError(f"trainer.schedule={cfg.trainer.schedule!r}; use null or cosine")
    out_dir = Path(cfg.trainer.out_dir or _hydra_dir() or tempfile.mkdtemp(prefix="wsad-run-"))
    return Setup(store, fit_videos, val_videos, store.videos("test"), std, bags, pooling, k,
                 bags.items(store, fit_videos), BagLoader(store, bags, std, ArrayCache(float(cfg.data.cache_mb))),
                 model, build_terms(cfg), optimizer, schedule, epochs, out_dir)


def train(cfg: DictConfig, overrides: list[str] | None = None) -> float:
    """Train, evaluate and log one run; returns the weak-validation video AUC
    of the selected epoch (what a sweeper should optimise; never a test metric).

    ``trainer.resume=RUN_ID`` continues an interrupted run from its last saved
    state, with the configuration it was started with."""
    state = None
    if cfg.trainer.get("resume"):
        cfg, state = _resume_point(cfg)
    else:
        apply_ablation(cfg)
    seed_everything(int(cfg.seed), cfg.trainer.threads)
    s = build(cfg)
    store, model = s.store, s.model
    epoch0, batch0 = 1, 0
    eval_cache = s.loader.cache  # one budget (data.cache_mb) for training bags and eval arrays
    best = (-math.inf, None, 0)  # (selection value, state dict, epoch)
    history: list[dict] = []
    partial = {"sums": {name: 0.0 for name in s.terms}, "total": 0.0, "n_batches": 0}
    if state is not None:
        model.load_state_dict(state["model"])
        s.optimizer.load_state_dict(state["optimizer"])
        if s.schedule is not None and state.get("schedule"):
            s.schedule.load_state_dict(state["schedule"])
        set_rng_state(state["rng"])
        epoch0, batch0 = state["epoch"], state["batch"]
        best = (state["best_value"], state["best_state"], state["best_epoch"])
        history, partial = state["history"], state["partial"]
    run = _start_run(cfg, overrides, store, cfg.trainer.get("resume"))
    resume_path = s.out_dir / "state" / "resume.pt"
    tracking.set_tag(run, "wsad.resume_checkpoint", str(resume_path.resolve()))

    def snapshot(epoch: int, batch: int) -> dict:
        return {"config": OmegaConf.to_yaml(cfg, resolve=True), "model": model.state_dict(),
                "optimizer": s.optimizer.state_dict(),
                "schedule": s.schedule.state_dict() if s.schedule is not None else None,
                "rng": rng_state(), "epoch": epoch, "batch": batch, "best_value": best[0],
                "best_state": best[1], "best_epoch": best[2], "history": history,
                "partial": partial}

    try:
        with GracefulStop() as stop:
            bar = tqdm(range(epoch0, s.epochs + 1), desc=f"train {cfg.get('recipe_name', '')}".strip(),
                       unit="epoch", disable=not cfg.trainer.progress, initial=epoch0 - 1,
                       total=s.epochs)
            for epoch in bar:
                model.train()
                started, segments = time.perf_counter(), 0
                batches = s.bags.batches(s.items, epoch, int(cfg.seed))
                for bi in range(batch0 if epoch == epoch0 else 0, len(batches)):
                    batch = s.loader.collate([s.items[i] for i in batches[bi]])
                    segments += int(batch.mask.sum())
                    out = model(batch.x, batch.mask)
                    bag_scores = pool(s.pooling, out, batch.mask, s.k)
                    inp = TermInputs(out.scores, out.logits, batch.mask, batch.y, bag_scores,
                                     lambda: out.embeddings, batch.pairs, lambda: out.packed_embeddings)
                    loss = 0.0
                    for name, (w, term) in s.terms.items():
                        value = term(inp)
                        partial["sums"][name] += float(value.detach())
                        loss = loss + w * value
                    s.optimizer.zero_grad(set_to_none=True)
                    loss.backward()
                    if cfg.trainer.grad_clip:
                        torch.nn.utils.clip_grad_norm_(model.parameters(), float(cfg.trainer.grad_clip))
                    s.optimizer.step()
                    partial["total"] += float(loss.detach())
                    partial["n_batches"] += 1
                    if stop.requested:  # the step is done: save where we are, then stop
                        save_state(resume_path, snapshot(epoch, bi + 1))
                        raise TrainingInterrupted(
                            f"stopped by signal {stop.signum} in epoch {epoch} after batch {bi + 1}; "
                            f"resume with trainer.resume={run.run_id if run else '<run id>'}",
                            stop.signum)
                if s.schedule is not None:
                    s.schedule.step()
                n = max(1, partial["n_batches"])
                row = {"train_loss": partial["total"] / n,
                       **{f"term/{k}": v / n for k, v in partial["sums"].items()},
                       # what an epoch costs: the benchmarks and sweep planning read these
                       "time/train_s": time.perf_counter() - started, "train_segments": segments,
                       "train_batches": len(batches)}
                started = time.perf_counter()
                partial = {"sums": {name: 0.0 for name in s.terms}, "total": 0.0, "n_batches": 0}
                if s.val_videos:  # weak validation: video labels of held-out train cameras
                    vs = score_videos(model, store, s.val_videos, s.std, s.bags.chunks, cache=eval_cache)
                    row["weak_val_video_auc"] = roc_auc([store.label(v) for v in s.val_videos],
                                                        [x.max() for x in vs.values()],
                                                        "weak validation video AUC")
                if epoch % int(cfg.trainer.eval_every) == 0 or epoch == s.epochs:
                    row.update(_quiet_metrics(video_scores(store, score_videos(
                        model, store, s.test_videos, s.std, s.bags.chunks, cache=eval_cache))))
                row["time/eval_s"] = time.perf_counter() - started
                history.append({"epoch": epoch, **row})
                tracking.log_metrics(run, row, step=epoch)
                chosen = row["weak_val_video_auc"] if cfg.trainer.select == "weak_val" else epoch
                if chosen >= best[0]:
                    best = (chosen, {n: v.clone() for n, v in model.state_dict().items()}, epoch)
                save_state(resume_path, snapshot(epoch + 1, 0))
                bar.set_postfix(loss=f"{row['train_loss']:.4f}",
                                val=f"{row.get('weak_val_video_auc', float('nan')):.3f}",
                                auc=f"{row.get('frame_auc', float('nan')):.3f}")

        # -- the selected model: final metrics and artifacts -----------------------------
        model.load_state_dict(best[1])
        test = video_scores(store, score_videos(model, store, s.test_videos, s.std, s.bags.chunks))
        final = _quiet_metrics(test)
        if int(cfg.trainer.bootstrap) > 0 and "frame_auc" in final:
            final.update(grouped_bootstrap(test, int(cfg.trainer.bootstrap), seed=int(cfg.seed)))
        final["selected_epoch"] = best[2]
        selected = history[best[2] - 1]
        if "weak_val_video_auc" in selected:
            final["weak_val_video_auc"] = selected["weak_val_video_auc"]
        tracking.log_metrics(run, final, step=s.epochs)
        _export(s.out_dir, cfg, model, s.std, store, test, history)
        tracking.finish(run, s.out_dir)
    except TrainingInterrupted:
        tracking.log_state(run, resume_path)
        tracking.finish(run, None, status="KILLED")
        raise
    except BaseException:
        tracking.finish(run, None, status="FAILED")
        raise
    train.last_result = {**final, "out_dir": str(s.out_dir), "run_id": run.run_id if run else None}
    return float(final.get("weak_val_video_auc", -history[-1]["train_loss"]))


def _resume_point(cfg: DictConfig) -> tuple[DictConfig, dict]:
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


def _in_multirun() -> bool:
    try:
        from hydra.core.hydra_config import HydraConfig
        from hydra.types import RunMode

        return HydraConfig.get().mode == RunMode.MULTIRUN
    except Exception:  # noqa: BLE001 - not running under Hydra
        return False


def _quiet_metrics(videos) -> dict[str, float]:
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        return compute_metrics(videos)


def _hydra_dir() -> str | None:
    try:
        from hydra.core.hydra_config import HydraConfig

        return HydraConfig.get().runtime.output_dir
    except Exception:  # noqa: BLE001 - not running under Hydra
        return None


def _start_run(cfg: DictConfig, overrides, store: FeatureStore, resume_id: str | None = None):
    if not cfg.tracking.enabled:
        return None
    if resume_id:
        return tracking.reopen_run(str(cfg.tracking.uri), str(resume_id))
    return tracking.start_run(cfg, overrides, store_fingerprint(store.root))


def _export(out_dir: Path, cfg, model, std, store, test, history) -> None:
    """The DESIGN artifacts: scores parquet, ROC and timeline plots, resolved
    config, checkpoint; plus the learning curve table."""
    for sub in ("scores", "plots", "config", "model"):
        (out_dir / sub).mkdir(parents=True, exist_ok=True)
    table = frame_table(test)
    tmp = out_dir / "scores" / "test_scores.parquet.tmp"
    table.to_parquet(tmp, index=False)
    tmp.replace(out_dir / "scores" / "test_scores.parquet")
    pd.DataFrame(history).to_csv(out_dir / "scores" / "history.csv", index=False)
    name = str(cfg.get("recipe_name", "model"))
    lab = table[table["label"] >= 0]
    if lab["label"].nunique() == 2:
        roc_plot({name: (lab["label"].to_numpy(), lab["score"].to_numpy())},
                 out_dir / "plots" / "roc.png", title=f"frame-level ROC, {name}")
    timeline_plot(test, out_dir / "plots" / "timelines.png", title=f"test videos, {name}")
    (out_dir / "config" / "resolved.yaml").write_text(OmegaConf.to_yaml(cfg, resolve=True))
    save_checkpoint(out_dir / "model" / "checkpoint.pt", model, cfg, std, store.dim)


train.last_result = {}
__all__ = ["train", "METRICS"]
