"""Two-stage self-training in one run (Feng, Hong & Zheng, CVPR 2021; the idea of
cleaning noisy segment labels, Zhong et al., CVPR 2019).

Stage 1 trains the recipe the config holds (a MIL objective) and selects its epoch
as any run does. Its selected model then labels the segments of the *training*
videos it was fitted on: every segment of a normal video 0; in an anomalous video,
scores are min-max normalised over the video and a segment with normalised score
>= ``self_training.threshold`` is 1, the rest get no label. Stage 2 trains a fresh
head on those labels (segment BCE over pseudo-labelled windows). Both stages log
into the one MLflow run, under ``stage1/`` and ``stage2/``; the selected stage-2
model is the run's result (its metrics unprefixed, its artifacts the run's).
A stopped run resumes in whichever stage it was in.
"""
from __future__ import annotations

import numpy as np
from omegaconf import DictConfig, OmegaConf, open_dict

from ..errors import WsadError
from ..store import FeatureStore
from .loop import fit
from .progress import Progress
from .run import RunResult, closing, conclude, open_sinks, score_and_evaluate, selection_metrics
from .setup import Setup, build


def stage_configs(cfg: DictConfig) -> tuple[DictConfig, DictConfig]:
    """Stage 1: the config without its ``self_training`` block. Stage 2: the same with
    the block's ``bags``, ``objective`` (every other term off) and ``epochs``."""
    st = cfg.self_training
    if not 0.0 <= float(st.threshold) <= 1.0:   # checked before stage 1 spends any time
        raise WsadError(f"self_training.threshold={st.threshold}; use a share of the video's score range in [0, 1]")
    first = OmegaConf.create(OmegaConf.to_container(cfg, resolve=True))
    with open_dict(first):
        first.pop("self_training")
    second = OmegaConf.create(OmegaConf.to_container(first, resolve=True))
    with open_dict(second):
        second.bags = st.stage2.bags
        second.objective = {name: float(st.stage2.objective.get(name, 0.0)) for name in second.objective}
        second.trainer.epochs = int(st.stage2.epochs)
    return first, second


def pseudo_labels(s: Setup, threshold: float) -> dict[str, np.ndarray]:
    """Segment labels of the stage-1 fit videos from its selected model (see module doc)."""
    scores = s.scorer()(s.store, s.fit_videos)
    return {v: label_segments(x, s.store.label(v), threshold) for v, x in scores.items()}


def label_segments(scores: np.ndarray, video_label: int, threshold: float) -> np.ndarray:
    """One video's pseudo labels: all 0 for a normal video; for an anomalous one, 1 where
    (s - min s) / (max s - min s) >= threshold (every segment when the scores are flat),
    else -1 (no label)."""
    x = np.asarray(scores, dtype=np.float64)
    if video_label == 0:
        return np.zeros(len(x), np.int8)
    span = x.max() - x.min()
    norm = (x - x.min()) / span if span > 0 else np.ones_like(x)
    return np.where(norm >= threshold, 1, -1).astype(np.int8)


def train_two_stages(cfg: DictConfig, overrides, state: dict | None,
                     transfer: list[tuple[str, FeatureStore]], extra: list | None = None) -> RunResult:
    first, second = stage_configs(cfg)
    if cfg.trainer.members not in ("auto", 1):
        raise WsadError(f"trainer.members={cfg.trainer.members}: a two-stage run trains one model per stage "
                        "(use trainer.members=1, or average seeds in a study)")
    s1 = build(first)
    resumed_stage = int(state.get("stage", 1)) if state is not None else 1
    prog1 = Progress.restore(state, s1) if resumed_stage == 1 and state is not None else Progress.start(s1)
    sinks = open_sinks(cfg, overrides, s1, extra)
    resume_path = s1.out_dir / "state" / "resume.pt"
    sinks.tag("wsad.resume_checkpoint", str(resume_path.resolve()))
    with closing(sinks, resume_path):
        if resumed_stage == 1:
            fit(first, s1, prog1, sinks, resume_path, prefix="stage1/", saved=(cfg, {"stage": 1}))
            ev = score_and_evaluate(first, s1, prog1, transfer)   # logged only: the run's files are stage 2's
            metrics = {**ev.metrics, **selection_metrics(prog1)}
            sinks.log_rows([(s1.epochs, None, {f"stage1/{k}": v for k, v in metrics.items()})])
            stage1_best = prog1.best_state
        else:
            stage1_best = state["stage1_best"]
            s1.model.load_state_dict(stage1_best)
        labels = pseudo_labels(s1, float(cfg.self_training.threshold))
        s2 = build(second)
        if not hasattr(s2.bags, "attach"):
            raise WsadError("self_training.stage2.bags must carry pseudo labels "
                            "(_target_: wsad.bags.pseudo.PseudoLabelWindows)")
        s2.bags.attach(labels)
        prog2 = Progress.restore(state, s2) if resumed_stage == 2 else Progress.start(s2)
        fit(second, s2, prog2, sinks, resume_path, prefix="stage2/",
            saved=(cfg, {"stage": 2, "stage1_best": stage1_best}))
        labelled = np.concatenate(list(labels.values()))
        sinks.log_rows([(0, None, {"stage2/pseudo_positive_share": float((labelled == 1).mean()),
                                   "stage2/pseudo_unlabelled_share": float((labelled == -1).mean())})])
        return conclude(second, s2, prog2, sinks, transfer, saved_cfg=cfg)
