"""The correlated-stream generator.

Every segment feature of video v (camera c, scene context k) is

    x_t = g_k + b * (sqrt(s) * c_c + sqrt(1 - s) * c_v) + e_t + sum_j a_{j,t} * snr_j * u_j

- g_k: the context's look (conveyor line, loading bay, walkway), per-dim scale ``context_scale``;
- c_c, c_v: camera and video backgrounds, per-dim N(0, 1), mixed by ``camera_share`` s and
  scaled by ``background_scale`` b: s = 1 makes all videos of a camera look alike;
- e_t: unit-variance AR(1) noise per dim, e_t = rho e_{t-1} + sqrt(1 - rho^2) w_t, so
  consecutive segments of one fixed camera are correlated with lag-1 coefficient rho;
- u_j: a unit signature per event type (and one for normal busy periods); a_{j,t} in [0, 1] is
  the share of segment t's frames inside event j, weighted by a linear onset ramp. The shift
  along u_j is snr_j noise standard deviations.

Event types are anomalous in some contexts and may be normal in others (a forklift in a
loading bay is routine, in a walkway it is an incident). Ground truth is written in frames.
"""
from __future__ import annotations

import zlib
from dataclasses import dataclass
from pathlib import Path

import numpy as np
import pandas as pd
from omegaconf import DictConfig, OmegaConf
from scipy.signal import lfilter
from tqdm.auto import tqdm

from ..store.atomic import new_store_dir, refuse_existing, write_store_json
from ..store.format import MANIFEST_COLUMNS


@dataclass
class Signatures:
    """The scenario-wide random directions, fixed by the scenario seed."""

    context: dict[str, np.ndarray]
    event: dict[str, np.ndarray]
    busy: np.ndarray

    @staticmethod
    def build(cfg: DictConfig) -> Signatures:
        # Each direction is seeded by its own name, so the order of keys in a recipe (or in
        # the copy kept in store.json) does not matter, and adding a type changes no other.
        d = int(cfg.dim)

        def draw(kind: str, name: str) -> np.ndarray:
            parts = [7, zlib.crc32(f"{kind}:{name}".encode())]
            # the scene's look belongs to the site; what an event looks like does not
            seed = site_seed(cfg, *parts) if kind == "context" else [int(cfg.seed), *parts]
            return np.random.default_rng(seed).standard_normal(d)

        def unit(kind: str, name: str) -> np.ndarray:
            u = draw(kind, name)
            return u / np.linalg.norm(u)

        context = {k: float(cfg.context_scale) * draw("context", k) for k in cfg.cameras}
        event = {t: unit("event", t) for t in cfg.events.types}
        return Signatures(context=context, event=event, busy=unit("busy", "busy"))


def site_seed(cfg: DictConfig, *parts: int) -> list[int]:
    """The seed of something that belongs to a site (camera placement, backgrounds, footage):
    site 1 keeps the seeds of a recipe without ``site``; another site draws them anew."""
    site = int(cfg.get("site", 1))
    return [int(cfg.seed), *parts] if site == 1 else [int(cfg.seed), *parts, 1_000_003 * site]


def _lognormal_int(rng, spec, size=None) -> np.ndarray:
    mean, spread = float(spec.mean), float(spec.spread)
    x = mean * np.exp(spread * rng.standard_normal(size) - spread ** 2 / 2)
    hi = int(spec.max) if "max" in spec else np.iinfo(np.int32).max
    return np.clip(np.round(x), int(spec.min), hi).astype(int)


def _envelope(frames: int, seg_frames: int, n_seg: int, start: int, end: int,
              onset_frames: int) -> np.ndarray:
    """Per-segment weight of an event over frames [start, end) with an onset ramp."""
    f = np.zeros(frames)
    ramp = np.minimum(1.0, (np.arange(end - start) + 1) / max(1, onset_frames))
    f[start:end] = ramp
    seg = np.minimum(np.arange(frames) // seg_frames, n_seg - 1)
    return np.bincount(seg, weights=f, minlength=n_seg) / np.bincount(seg, minlength=n_seg)


def _place(rng, frames: int, n: int, dur_frames: np.ndarray) -> list[tuple[int, int]]:
    """n non-overlapping intervals, one inside each of n equal slots of the video."""
    spans = []
    slot = frames // n
    for i in range(n):
        d = int(min(dur_frames[i], max(1, slot - 1)))
        lo = i * slot
        s = lo + int(rng.integers(0, max(1, slot - d)))
        spans.append((s, min(frames, s + d)))
    return spans


def _video(cfg: DictConfig, sig: Signatures, ctx: str, cam_vec: np.ndarray, anomalous: bool,
           rng: np.random.Generator):
    """One video's features [crops, T, D] (float64) and its anomalous frame spans."""
    d, sf = int(cfg.dim), int(cfg.segment_frames)
    n_seg = int(_lognormal_int(rng, cfg.length))
    frames = n_seg * sf + int(rng.integers(0, sf))
    share = float(cfg.camera_share)
    base = sig.context[ctx] + float(cfg.background_scale) * (
        np.sqrt(share) * cam_vec + np.sqrt(1 - share) * rng.standard_normal(d))
    rho = float(cfg.rho)
    w = rng.standard_normal((n_seg, d))
    w[0] /= np.sqrt(1 - rho ** 2)  # start in the stationary distribution
    x = lfilter([np.sqrt(1 - rho ** 2)], [1.0, -rho], w, axis=0) + base
    ev = cfg.events
    onset = int(ev.onset) * sf

    def add(signature: np.ndarray, snr: float, span: tuple[int, int]) -> None:
        env = _envelope(frames, sf, n_seg, span[0], span[1], onset)
        jitter = np.exp(float(ev.snr_jitter) * rng.standard_normal())
        x[:] += np.outer(env * snr * jitter, signature)

    # normal activity first: busy periods and events that are routine in this context
    for _ in range(rng.poisson(float(cfg.busy.rate))):
        dur = int(_lognormal_int(rng, cfg.busy.duration)) * sf
        s = int(rng.integers(0, max(1, frames - dur)))
        add(sig.busy, float(cfg.busy.snr), (s, min(frames, s + dur)))
    routine = [t for t, spec in ev.types.items() if ctx in spec.get("normal_in", [])]
    for t in routine:
        for _ in range(rng.poisson(float(ev.normal_rate))):
            dur = int(_lognormal_int(rng, ev.duration)) * sf
            s = int(rng.integers(0, max(1, frames - dur)))
            add(sig.event[t], float(ev.snr), (s, min(frames, s + dur)))
    spans: list[tuple[int, int]] = []
    if anomalous:
        kinds = [t for t, spec in ev.types.items() if ctx in spec.get("anomalous_in", [])]
        n = int(rng.integers(int(ev.per_video.min), int(ev.per_video.max) + 1))
        durs = _lognormal_int(rng, ev.duration, size=n) * sf
        for span in _place(rng, frames, n, durs):
            add(sig.event[kinds[int(rng.integers(len(kinds)))]], float(ev.snr), span)
            spans.append(span)
    crops = int(cfg.crops)
    if crops > 1:
        views = x[None] + float(cfg.crop_noise) * rng.standard_normal((crops, n_seg, d))
    else:
        views = x[None]
    return views, frames, spans


def _plan(cfg: DictConfig) -> list[dict]:
    """The manifest rows in order (grouped by camera), with the true labels."""
    rng = np.random.default_rng(site_seed(cfg, 11))
    site = int(cfg.get("site", 1))
    rows = []
    for ctx, counts in cfg.cameras.items():
        can_be_anomalous = any(ctx in spec.get("anomalous_in", []) for spec in cfg.events.types.values())
        for split in ("train", "test"):
            for i in range(int(counts[split])):
                cam = f"{ctx}_{split}{i + 1:02d}" if site == 1 else f"site{site}_{ctx}_{split}{i + 1:02d}"
                n = int(cfg.videos_per_camera[split])
                n_anom = int(round(float(cfg.anomalous_share) * n)) if can_be_anomalous else 0
                flags = np.zeros(n, dtype=bool)
                flags[rng.permutation(n)[:n_anom]] = True
                for j in range(n):
                    rows.append({"video": f"{cam}_v{j + 1:03d}", "group": cam, "context": ctx,
                                 "split": split, "anomalous": bool(flags[j])})
    return rows


def generate_store(cfg: DictConfig, out: str | Path, progress: bool = True) -> Path:
    """Write the scenario ``cfg`` as a store at ``out`` (new or empty folder).

    Deterministic by ``cfg.seed``: the same config gives a byte-identical store.
    """
    out = Path(out)
    refuse_existing(out, "out=", "wsad-synth")
    sig = Signatures.build(cfg)
    plan = _plan(cfg)
    cam_vecs: dict[str, np.ndarray] = {}
    manifest, events = [], []
    noise_rng = np.random.default_rng(site_seed(cfg, 13))
    with new_store_dir(out, "out=", "wsad-synth") as tmp:
        for k, row in enumerate(tqdm(plan, desc=f"synth {cfg.name}", unit="video",
                                     disable=not progress)):
            if row["group"] not in cam_vecs:
                cam_vecs[row["group"]] = np.random.default_rng(
                    site_seed(cfg, 17, len(cam_vecs))).standard_normal(int(cfg.dim))
            rng = np.random.default_rng(site_seed(cfg, 23, k))
            views, frames, spans = _video(cfg, sig, row["context"], cam_vecs[row["group"]],
                                          row["anomalous"], rng)
            arr = views[0] if int(cfg.crops) == 1 else views
            np.save(tmp / "features" / f"{row['video']}.npy", arr.astype(str(cfg.dtype)))
            label = int(row["anomalous"])
            if row["split"] == "train" and noise_rng.random() < float(cfg.label_noise):
                label = 1 - label  # weak labels are noisy in practice; test labels stay true
            manifest.append({"video": row["video"], "file": f"features/{row['video']}.npy",
                             "label": label, "split": row["split"], "group": row["group"],
                             "frames": frames})
            if label == 1:
                events += [{"video": row["video"], "start": s, "end": e} for s, e in spans]
        pd.DataFrame(manifest, columns=MANIFEST_COLUMNS).to_csv(tmp / "manifest.csv", index=False)
        pd.DataFrame(events, columns=["video", "start", "end"]).to_csv(tmp / "events.csv", index=False)
        write_store_json(tmp, cfg.dim, cfg.segment_frames,
                         f"synthetic scenario {cfg.name}: {cfg.description}".strip(),
                         fps=float(cfg.get("fps", 25)), scenario=OmegaConf.to_container(cfg, resolve=True))
    return out
