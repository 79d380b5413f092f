"""Several models in one run, their scores averaged: the small-collection mode.

On a collection of a few hundred bags, one model's test scores and its video threshold move
with its seed: measured on five open MIL collections (docs: "Small collections"), averaging
the segment scores of five models trained with different seeds raised the mean bag AUC on two
(level on two, lower within its noise on one) and cut the fold-to-fold spread of the balanced
accuracy at the video threshold by 17-47 % with seeds 0-4; with the mode's own seeds it fell on
two of the three small collections and rose on one, at five times a small run's training.
``trainer.members=auto`` does it where that cost is small (a training split of fewer than
:data:`SMALL_SEGMENTS` segments); ``trainer.members=1`` keeps one model, ``N`` asks for N.
Every member trains on the same videos with the same standardiser and is selected on the
same weak validation; member ``i`` uses seed ``seed + 1000 i``. The threshold
and the operating point are chosen on the averaged held-out scores, like any run's.

``trainer.members_holdout=folds`` deals the training cameras into one fold per member instead:
member ``i`` is selected on fold ``i`` and trained on the rest, so every training video is held
out by exactly one member, and the threshold and the operating point are chosen on those
out-of-fold scores (every training video, not a fifth of them). The standardiser is then fitted
on every training video (no labels), as the members share it. Measured (docs: "Small
collections"), it steadied the balanced accuracy on elephant but not on ucsb_breast_cancer, and
lowered elephant's bag AUC over two fold assignments (0.940 to 0.930), so the mode does not use it.

The mode sets the video threshold halfway between the two classes' median held-out scores
(``evaluate.video_threshold_rule=class_medians``): measured with six seeds on fixed folds, with
five members it cut the spread over seeds of the test balanced accuracy against one model by
23 % and 31 % on the two small collections measured, its mean up.
"""
from __future__ import annotations

import copy
import tempfile

import torch
from omegaconf import DictConfig, open_dict

from ..errors import WsadError
from ..publish import Sinks
from ..store import FeatureStore

#: Below this many training segments a collection is small: five models cost seconds there.
#: The collections it was measured on below that hold 1,391-2,212 (elephant, ucsb_breast_cancer,
#: web_recommendation_1); the demo store holds about 10,800.
SMALL_SEGMENTS = 4000
#: Members of the small-collection mode.
SMALL_MEMBERS = 5
#: Seed offset between members (apart from the seeds a study gives its runs: 0, 1, 2, ...).
SEED_STEP = 1000


def member_count(cfg: DictConfig, store: FeatureStore) -> tuple[int, str | None]:
    """How many models the run trains (``trainer.members`` resolved), and the warning that
    says the small-collection mode chose it (None when it did not). The size counted is the
    whole training split's (the held-out share included)."""
    value = cfg.trainer.members
    if value != "auto":
        if isinstance(value, bool) or not isinstance(value, int) or value < 1:
            raise WsadError(f"trainer.members={value}; use auto or a count >= 1")
        return int(value), None
    segments = 0
    for v in store.videos("train"):
        segments += store.n_segments(v)
        if segments >= SMALL_SEGMENTS:
            return 1, None
    return SMALL_MEMBERS, (
        f"a small collection ({segments} training segments < {SMALL_SEGMENTS}): the run averages the scores of "
        f"{SMALL_MEMBERS} models (seeds seed + {SEED_STEP} i) and sets the video threshold halfway between the two "
        "classes' median held-out scores; "
        "steadier on collections this small; trainer.members=1 trains one (docs: \"Small collections\")")


def resolve_members(cfg: DictConfig, store: FeatureStore) -> str | None:
    """Write the resolved count into ``cfg.trainer.members`` and the threshold rule where it is
    ``auto`` (the mode's: class medians; what the run logs); the warning."""
    count, said = member_count(cfg, store)
    with open_dict(cfg):
        cfg.trainer.members = count
        if cfg.evaluate.get("video_threshold_rule", "auto") == "auto":
            cfg.evaluate.video_threshold_rule = "class_medians" if said is not None else "balanced_accuracy"
    return said


def train_members(cfg: DictConfig, count: int) -> tuple[list[torch.nn.Module], list[list[str]]]:
    """Members 2..``count``: trained silently and without tracking, each kept at its own
    selected epoch, in evaluation mode; with their held-out videos when each holds out its own
    fold (``trainer.members_holdout=folds``; else an empty list)."""
    from .loop import fit
    from .progress import Progress
    from .setup import build, holdout_folds, seed_everything

    models, heldout = [], []
    folds = holdout_folds(cfg)
    for i in range(1, count):
        sub = copy.deepcopy(cfg)
        with open_dict(sub):
            sub.seed = int(cfg.seed) + SEED_STEP * i
            if folds > 1:
                sub.trainer.weak_val_fold = i
            sub.trainer.eval_every = 10 ** 9   # test curves are the first member's
            sub.trainer.progress = False
            sub.trainer.out_dir = tempfile.gettempdir()   # nothing is written: no resume state, no files
        seed_everything(int(sub.seed), cfg.trainer.threads)
        s = build(sub)
        prog = Progress.start(s)
        fit(sub, s, prog, Sinks(), None, prefix=f"member {i + 1}/{count} ")   # redone on a resume
        s.model.load_state_dict(prog.best_state)
        s.model.eval()
        models.append(s.model)
        if folds > 1:
            heldout.append(list(s.val_videos))
    return models, heldout
