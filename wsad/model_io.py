"""Building a model from config, scoring videos with it, saving and loading checkpoints."""
from __future__ import annotations

import io
import pickle
from pathlib import Path

import numpy as np
import torch
from hydra.utils import instantiate
from omegaconf import DictConfig, OmegaConf

from .bags.base import ArrayCache, Standardizer, resample_chunks
from .errors import WsadError
from .evaluate import VideoScores, chunks_to_segments
from .store.format import FeatureStore


def build_component(node, what: str, **kwargs):
    """``instantiate`` with errors as one line: a component's own WsadError
    passes through; anything else names the component and its target."""
    from hydra.errors import InstantiationException

    try:
        return instantiate(node, **kwargs)
    except InstantiationException as err:
        cause = err.__cause__
        if isinstance(cause, WsadError):
            raise cause from None
        target = node.get("_target_", "?") if hasattr(node, "get") else "?"
        detail = str(cause or err).strip().splitlines()[-1]
        raise WsadError(f"could not build {what} ({target}): {detail}") from None


def build_head(cfg: DictConfig, in_dim: int) -> torch.nn.Module:
    return build_component(cfg.head, "head", in_dim=in_dim)


@torch.no_grad()
def score_videos(model: torch.nn.Module, store: FeatureStore, videos: list[str],
                 std: Standardizer, chunks: int | None, max_segments: int = 16384,
                 cache: ArrayCache | None = None) -> dict[str, np.ndarray]:
    """Segment scores per video (mean over views), in eval mode. Videos are
    read lazily and scored in packed batches of up to ``max_segments`` real
    segments (no padding is computed), so memory stays bounded. ``cache``
    keeps prepared arrays between calls (the per-epoch evaluation) within its
    budget."""
    was_training = model.training
    model.eval()
    out: dict[str, np.ndarray] = {}

    def prepare(v: str) -> np.ndarray:
        x = cache.get(("eval", v)) if cache is not None else None
        if x is not None:
            return x
        x = std(store.views(v))                      # [V, T, D]
        if chunks:
            x = np.stack([resample_chunks(view, chunks) for view in x])
        if cache is not None:
            cache.put(("eval", v), x)
        return x

    def flush(group: list[tuple[str, np.ndarray]]) -> None:
        lengths = np.array([a.shape[1] for _, a in group for _ in range(len(a))])
        x = np.concatenate([a.reshape(-1, store.dim) for _, a in group])
        mask = np.arange(lengths.max())[None, :] < lengths[:, None]
        s = model(torch.from_numpy(x), torch.from_numpy(mask)).scores.numpy()
        r = 0
        for v, a in group:
            sc = s[r:r + len(a), :a.shape[1]].mean(axis=0)
            r += len(a)
            out[v] = chunks_to_segments(sc, store.n_segments(v)) if chunks else sc

    group: list[tuple[str, np.ndarray]] = []
    rows = 0
    for v in sorted(videos, key=store.n_segments):
        a = prepare(v)
        if group and rows + a.size // store.dim > max_segments:
            flush(group)
            group, rows = [], 0
        group.append((v, a))
        rows += a.size // store.dim
    if group:
        flush(group)
    model.train(was_training)
    return {v: out[v] for v in videos}


def video_scores(store: FeatureStore, scores: dict[str, np.ndarray]) -> list[VideoScores]:
    return [VideoScores(v, store.group(v), store.label(v), s, store.frame_labels(v),
                        store.frames(v), store.segment_frames) for v, s in scores.items()]


def save_checkpoint(path: Path, model, cfg: DictConfig, std: Standardizer, dim: int,
                    extra: dict | None = None) -> Path:
    """A state dict plus config, written atomically (temporary file + rename)."""
    path = Path(path)
    path.parent.mkdir(parents=True, exist_ok=True)
    payload = {"state_dict": model.state_dict(), "config": OmegaConf.to_yaml(cfg, resolve=True),
               "standardizer": std.state(), "dim": int(dim), **(extra or {})}
    tmp = path.with_suffix(path.suffix + ".tmp")
    torch.save(payload, tmp)
    tmp.replace(path)
    return path


def load_checkpoint(path: str | Path) -> dict:
    """Load with ``weights_only=True``: tensors and plain containers only, so a
    crafted file cannot run code while it is read."""
    path = Path(path)
    if not path.is_file():
        raise WsadError(f"checkpoint {path} does not exist")
    try:
        return torch.load(path, map_location="cpu", weights_only=True)
    except pickle.UnpicklingError as err:
        raise WsadError(f"checkpoint {path} holds objects other than tensors and plain data; "
                        f"refused to load it ({str(err).splitlines()[0][:120]})") from None
    except (RuntimeError, EOFError, io.UnsupportedOperation, ValueError) as err:
        raise WsadError(f"checkpoint {path} is not a readable wsad checkpoint ({err})") from None


def model_from_checkpoint(ckpt: dict):
    cfg = OmegaConf.create(ckpt["config"])
    model = build_head(cfg, ckpt["dim"])
    model.load_state_dict(ckpt["state_dict"])
    model.eval()
    return model, cfg, Standardizer.from_state(ckpt["standardizer"])
