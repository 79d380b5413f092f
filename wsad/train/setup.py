"""Everything a run is built from, made from the config before any batch is read."""
from __future__ import annotations

import os
import random
import tempfile
import warnings
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np
import torch
from omegaconf import DictConfig, open_dict

from ..bags.base import BagConstruction
from ..checkpoint import build_head
from ..data.batch import BagLoader, Item
from ..data.cache import ArrayCache
from ..data.scorer import Scorer
from ..data.standardize import Standardizer
from ..errors import WsadError
from ..pooling.modules import Pooling
from ..registry import build_component
from ..settings import check_config
from ..store import FeatureStore
from ..store.check_cache import errors_of
from ..terms.base import Term


def deterministic() -> None:
    """Deterministic kernels for eager PyTorch. The public ``torch.use_deterministic_algorithms``
    also imports the compiler's config to set its flag there (1.7 s of a cold start measured here;
    wsad compiles nothing), so the flag is set directly when this torch has the call."""
    setter = getattr(torch._C, "_set_deterministic_algorithms", None)
    if setter is None:
        torch.use_deterministic_algorithms(True)
    else:
        setter(True)


def seed_everything(seed: int, threads: int | None) -> None:
    random.seed(seed)
    np.random.seed(seed)
    torch.manual_seed(seed)
    if not torch.are_deterministic_algorithms_enabled():
        deterministic()
    if threads is None:  # one thread per job when a sweep runs jobs side by side
        threads = 1 if in_multirun() else (os.cpu_count() or 1)
    torch.set_num_threads(max(1, int(threads)))


def apply_ablation(cfg: DictConfig) -> None:
    """ablation.toggle=<term>: off if the recipe uses it, on at ablation.on_weight.<term> if not."""
    name = cfg.get("ablation", {}).get("toggle", "none")
    if name in (None, "none"):
        return
    if name not in cfg.objective:
        raise WsadError(f"ablation.toggle={name!r} is not a term; known: none, "
                        f"{', '.join(cfg.objective.keys())}")
    on = float(cfg.ablation.get("on_weight", {}).get(name, 1.0))
    cfg.objective[name] = 0.0 if float(cfg.objective[name]) > 0 else on


def weak_validation_split(store: FeatureStore, share: float, folds: int = 1,
                          fold: int = 0) -> tuple[list[str], list[str]]:
    """Hold out whole train groups (cameras) for weak validation: video AUC on
    video labels, never test labels. Fixed by the data, not the seed, so every
    variant and seed is selected on the same videos. With ``folds`` > 1 the
    groups are dealt into that many folds and fold ``fold`` is held out
    (``share`` is then unused)."""
    train = store.videos("train")
    if share <= 0 and folds <= 1:
        return train, []
    m = store.manifest[store.manifest["split"] == "train"]
    groups = sorted(m["group"].unique())
    rng = np.random.default_rng(12345)
    held: list[str] = []
    order = rng.permutation(groups)
    if folds > 1:
        held = list(order[fold::folds])
    for g in order if folds <= 1 else ():
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
        taken = set(idx[fold::folds]) if folds > 1 else set(idx[:n])
        val = [train[i] for i in idx if i in taken]
        fit = [train[i] for i in idx if i not in taken]
    return fit, val


def build_terms(cfg: DictConfig) -> dict[str, tuple[float, Term]]:
    """The enabled terms with their weights, in the order of ``cfg.objective``."""
    terms = {}
    for name, weight in cfg.objective.items():
        weight = float(weight)
        if weight < 0:
            raise WsadError(f"objective.{name}={weight}: weights must be >= 0 (0 disables a term)")
        if weight == 0:
            continue
        if name not in cfg.terms:
            raise WsadError(f"objective.{name} has no settings (no terms/{name}.yaml on the search "
                            f"path); known terms: {', '.join(cfg.terms.keys())}")
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
    bags: BagConstruction
    pooling: Pooling
    items: list[Item]
    loader: BagLoader
    model: torch.nn.Module
    terms: dict[str, tuple[float, Term]]
    optimizer: torch.optim.Optimizer
    schedule: torch.optim.lr_scheduler.LRScheduler | None
    epochs: int
    out_dir: Path
    members: list[torch.nn.Module] = field(default_factory=list)   # the run's other models (.members)
    members_heldout: list[list[str]] = field(default_factory=list)  # each one's held-out videos (folds only)

    def scorer(self, state: dict | None = None) -> Scorer:
        """The model as a :class:`~wsad.data.scorer.Scorer` (holding ``state`` when given),
        with the run's other members once they are trained."""
        if state is not None:
            self.model.load_state_dict(state)
        return Scorer(self.model, self.std, self.bags.chunks, list(self.members))


def build(cfg: DictConfig) -> Setup:
    """Check the config's own settings and the store, split it, and build every component."""
    check_config(cfg)
    epochs = int(cfg.trainer.epochs)
    if epochs < 1:
        raise WsadError(f"trainer.epochs={epochs}; train for at least 1 epoch")
    check_selection(cfg.trainer, epochs)
    bags = build_component(cfg.bags, "bags")
    pooling = build_component(cfg.pooling, "pooling")
    terms = build_terms(cfg)
    for name, (_, term) in terms.items():
        if getattr(term, "needs_targets", False) and not getattr(bags, "gives_targets", False):
            raise WsadError(f"objective.{name} needs segment labels, which bags={type(bags).__name__} does not "
                            "give (they come from recipe=self_training's second stage)")
    errors = errors_of(cfg.data.root)   # the full check, once per store content
    if errors:
        raise WsadError(f"the store {cfg.data.root} has {len(errors)} problem(s), first: {errors[0]}; "
                        f"run wsad-check {cfg.data.root}")
    store = FeatureStore(cfg.data.root, crops=cfg.data.crops)
    folds, member_folds = int(cfg.trainer.weak_val_folds), holdout_folds(cfg)
    if member_folds > 1:   # this member holds out its own fold of the training cameras
        fit_videos, val_videos = weak_validation_split(store, 0.0, member_folds, int(cfg.trainer.weak_val_fold))
    else:
        fit_videos, val_videos = weak_validation_split(store, float(cfg.trainer.weak_val_share), folds,
                                                       int(cfg.trainer.weak_val_fold))
    if cfg.trainer.select == "weak_val" and not val_videos:
        raise WsadError("trainer.select=weak_val needs trainer.weak_val_share > 0")
    resolve_interval_unit(cfg, store)
    # members holding out different folds share one standardiser (the scorer and checkpoint hold one):
    # fitted on every training video, without labels
    std_videos = store.videos("train") if member_folds > 1 else fit_videos
    std = Standardizer.fit(store, std_videos) if cfg.data.standardize else Standardizer()
    model = build_head(cfg, store.dim)
    pooling.check(model)
    optimizer = build_component(cfg.optim, "optim", params=model.parameters())
    node = cfg.get("schedule")
    schedule = build_component(node, "schedule", optimizer=optimizer) if node and "_target_" in node else None
    out_dir = Path(cfg.trainer.out_dir or hydra_dir() or tempfile.mkdtemp(prefix="wsad-run-"))
    loader = BagLoader(store, bags, std, ArrayCache(float(cfg.data.cache_mb)))
    return Setup(store, fit_videos, val_videos, store.videos("test"), std, bags, pooling,
                 bags.items(store, fit_videos), loader, model, terms, optimizer, schedule, epochs, out_dir)


def holdout_folds(cfg: DictConfig) -> int:
    """How many folds the run's members hold out, one each (``trainer.members_holdout=folds`` with
    a resolved member count > 1); 1 when they share the usual held-out share."""
    members = cfg.trainer.members
    if cfg.trainer.members_holdout == "folds" and isinstance(members, int) and members > 1:
        return members
    return 1


def check_selection(trainer: DictConfig, epochs: int) -> None:
    """The model-selection settings (see :mod:`wsad.train.selection`)."""
    smooth, min_epoch = int(trainer.select_smooth), int(trainer.min_epoch)
    folds = int(trainer.weak_val_folds)
    if smooth < 1:
        raise WsadError(f"trainer.select_smooth={smooth}; use 1 (no smoothing) or a window of epochs")
    if not 1 <= min_epoch <= epochs:
        raise WsadError(f"trainer.min_epoch={min_epoch}; use 1..trainer.epochs ({epochs})")
    if folds < 1:
        raise WsadError(f"trainer.weak_val_folds={folds}; use 1 (one held-out share) or k >= 2 folds")
    if trainer.members_holdout == "folds" and (folds > 1 or trainer.refit):
        raise WsadError("trainer.members_holdout=folds gives each member its own held-out fold; it does not "
                        "combine with trainer.weak_val_folds > 1 or trainer.refit (which hold out nothing at the end)")
    if (folds > 1 or trainer.refit) and trainer.select != "weak_val":
        raise WsadError("trainer.weak_val_folds > 1 and trainer.refit select an epoch count on weak "
                        "validation; they need trainer.select=weak_val")


def resolve_interval_unit(cfg: DictConfig, store: FeatureStore) -> None:
    """``trainer.bootstrap_by``: the unit intervals treat as independent. Unset, it is the
    camera (videos of one camera share its background); the chosen value is what the run
    logs as its param."""
    by = cfg.trainer.bootstrap_by or "group"
    with open_dict(cfg):
        cfg.trainer.bootstrap_by = by


def draws_plots(cfg: DictConfig) -> bool:
    """``trainer.plots``: true, false, or auto: a single run draws its plots; the runs of a
    sweep leave them out (~1 s of each run, with matplotlib's import), since wsad-report
    draws the sweep's overlays from the same exported scores."""
    value = cfg.trainer.plots
    return not in_multirun() if value == "auto" else bool(value)


def in_multirun() -> bool:
    try:
        from hydra.core.hydra_config import HydraConfig
        from hydra.types import RunMode

        return HydraConfig.get().mode == RunMode.MULTIRUN
    except Exception:  # noqa: BLE001 - not running under Hydra
        return False


def hydra_dir() -> str | None:
    try:
        from hydra.core.hydra_config import HydraConfig

        return HydraConfig.get().runtime.output_dir
    except Exception:  # noqa: BLE001 - not running under Hydra
        return None
