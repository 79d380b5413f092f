"""Measurements of a synthetic store against its known ground truth."""
from __future__ import annotations

import numpy as np
from omegaconf import OmegaConf

from ..errors import WsadError
from ..store.format import FeatureStore
from .generator import Signatures


def lag1_autocorrelation(store: FeatureStore, split: str = "train", label: int = 0,
                         max_videos: int = 200) -> float:
    """Mean over videos and dims of the lag-1 autocorrelation of the
    de-meaned segment features, sum_t (x_t - m)(x_{t+1} - m) / sum_t (x_t - m)^2.
    Normal videos by default, so that events do not add correlation."""
    vals = []
    for v in store.videos(split)[:max_videos * 4]:
        if store.label(v) != label:
            continue
        x = store.views(v)[0].astype(np.float64)
        if len(x) < 3:
            continue
        x = x - x.mean(axis=0)
        num = (x[:-1] * x[1:]).sum(axis=0)
        den = (x ** 2).sum(axis=0)
        vals.append(float(np.mean(num / np.maximum(den, 1e-12))))
        if len(vals) >= max_videos:
            break
    if not vals:
        raise WsadError(f"no {split} videos with label {label} to measure")
    return float(np.mean(vals))


def _scenario(store: FeatureStore):
    scen = store.meta.get("scenario")
    if scen is None:
        raise WsadError(f"{store.root} is not a synthetic store; reference scorers need its scenario")
    cfg = OmegaConf.create(scen)
    return cfg, Signatures.build(cfg)


def _context(cfg, store: FeatureStore, video: str) -> str:
    return next(k for k in cfg.cameras if store.row(video)["group"].startswith(f"{k}_"))


def signature_scores(store: FeatureStore, video: str, smooth: int = 1) -> np.ndarray:
    """Per-segment score of a reference that knows the scenario's event signatures:
    the largest projection of x_t - g_k on the signatures of the event types that
    are anomalous in the video's context k. It does not know the camera's
    background, which it cannot tell apart from an event's shift. It is a
    reference, not a ceiling: ``smooth`` > 1 averages it over that many
    neighbouring segments (a centred moving mean), which already scores higher,
    since events last several segments."""
    cfg, sig = _scenario(store)
    ctx = _context(cfg, store, video)
    kinds = [t for t, spec in cfg.events.types.items() if ctx in spec.get("anomalous_in", [])]
    x = store.views(video).mean(axis=0).astype(np.float64) - sig.context[ctx]
    if not kinds:
        return np.full(len(x), -1e9)
    proj = np.max(np.stack([x @ sig.event[t] for t in kinds]), axis=0)
    if smooth > 1:
        kernel = np.ones(smooth)
        proj = np.convolve(proj, kernel, "same") / np.convolve(np.ones(len(proj)), kernel, "same")
    return proj


def context_scores(store: FeatureStore, video: str) -> np.ndarray:
    """A scorer that knows only the scene context: 1 on every segment of a camera
    whose context can hold an anomaly at all, 0 elsewhere. It knows nothing of
    events, so whatever frame AUC it reaches is credit for knowing the context."""
    cfg, _ = _scenario(store)
    ctx = _context(cfg, store, video)
    possible = any(ctx in spec.get("anomalous_in", []) for spec in cfg.events.types.values())
    return np.full(store.n_segments(video), 1.0 if possible else 0.0)


def anomalous_segment_share(store: FeatureStore, split: str = "test") -> float:
    """Share of segments (of all videos of a split) that overlap an event."""
    hit = total = 0
    sf = store.segment_frames
    for v in store.videos(split):
        t = store.n_segments(v)
        total += t
        lab = store.frame_labels(v)
        if lab is None or not lab.any():
            continue
        seg = np.minimum(np.arange(len(lab)) // sf, t - 1)
        hit += int((np.bincount(seg, weights=lab, minlength=t) > 0).sum())
    return hit / max(1, total)


def reference_metrics(store: FeatureStore, scorer: str = "signature", split: str = "test",
                      smooth: int = 1) -> dict[str, float]:
    """The DESIGN metrics of a reference scorer on a split: ``signature`` (see
    :func:`signature_scores`, with ``smooth``) or ``context`` (:func:`context_scores`)."""
    from ..evaluate import VideoScores, compute_metrics

    def score(v):
        return signature_scores(store, v, smooth) if scorer == "signature" else context_scores(store, v)

    vids = [VideoScores(v, store.row(v)["group"], store.label(v), score(v), store.frame_labels(v),
                        store.frames(v), store.segment_frames) for v in store.videos(split)]
    return compute_metrics(vids)


def camera_share(store: FeatureStore, split: str = "train", label: int = 0, max_videos: int = 400) -> float:
    """How alike the videos of one camera are: the intra-class correlation ICC(1) of the video
    mean features with the camera as class (Shrout & Fleiss 1979, one-way random effects),
    ``(MSB - MSW) / (MSB + (k - 1) MSW)`` per dim with k the mean videos per camera, averaged
    over dims and clipped to [0, 1]. Normal videos only. On the generator's stores it grows with
    ``camera_share`` (scene contexts shared by several cameras add to it)."""
    videos = [v for v in store.videos(split) if store.label(v) == label][:max_videos]
    means = {v: store.views(v)[0].astype(np.float64).mean(axis=0) for v in videos}
    groups: dict[str, list[np.ndarray]] = {}
    for v, m in means.items():
        groups.setdefault(store.group(v), []).append(m)
    groups = {g: np.stack(ms) for g, ms in groups.items() if len(ms) >= 2}
    if len(groups) < 2:
        raise WsadError(f"camera_share needs at least two cameras with two {split} videos of label {label}")
    allm = np.concatenate(list(groups.values()))
    grand = allm.mean(axis=0)
    n, a = len(allm), len(groups)
    msb = sum(len(x) * (x.mean(axis=0) - grand) ** 2 for x in groups.values()) / (a - 1)
    msw = sum(((x - x.mean(axis=0)) ** 2).sum(axis=0) for x in groups.values()) / (n - a)
    k = (n - sum(len(x) ** 2 for x in groups.values()) / n) / (a - 1)
    icc = (msb - msw) / np.maximum(msb + (k - 1) * msw, 1e-12)
    return float(np.clip(np.mean(icc), 0.0, 1.0))
