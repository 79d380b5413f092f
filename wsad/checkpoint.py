"""Reading and writing model checkpoints (a state dict plus the config)."""
from __future__ import annotations

import io
import pickle
from pathlib import Path

import torch
from omegaconf import DictConfig, OmegaConf

from .data.scorer import Scorer
from .data.standardize import Standardizer
from .errors import WsadError
from .files import atomic_path
from .registry import build_component


def build_head(cfg: DictConfig, in_dim: int) -> torch.nn.Module:
    """The head ``cfg.head`` names, for features of width ``in_dim``."""
    return build_component(cfg.head, "head", in_dim=in_dim)


def save_torch(path: str | Path, payload: dict) -> Path:
    """``torch.save`` written atomically (temporary file + rename)."""
    with atomic_path(path) as tmp:
        torch.save(payload, tmp)
    return Path(path)


def save_checkpoint(path: str | Path, scorer: Scorer, cfg: DictConfig, dim: int) -> Path:
    """A scorer's state dict (and its other members'), standardiser and chunk count plus the
    config, loadable with ``weights_only``."""
    return save_torch(path, {"state_dict": scorer.model.state_dict(),
                             "members": [m.state_dict() for m in scorer.others],
                             "config": OmegaConf.to_yaml(cfg, resolve=True),
                             "standardizer": scorer.std.state(), "dim": int(dim), "chunks": scorer.chunks})


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


def model_from_checkpoint(ckpt: dict) -> tuple[torch.nn.Module, DictConfig, Standardizer]:
    """The trained head (in eval mode), its config and its standardiser."""
    cfg = OmegaConf.create(ckpt["config"])
    model = build_head(cfg, ckpt["dim"])
    model.load_state_dict(ckpt["state_dict"])
    model.eval()
    return model, cfg, Standardizer.from_state(ckpt["standardizer"])


def scorer_from_checkpoint(path: str | Path) -> tuple[Scorer, DictConfig, int]:
    """The :class:`~wsad.data.scorer.Scorer` a checkpoint holds, its config and feature width."""
    ckpt = load_checkpoint(path)
    model, cfg, std = model_from_checkpoint(ckpt)
    chunks = ckpt["chunks"] if "chunks" in ckpt else cfg.bags.get("chunks")   # older checkpoints: the YAML's
    others = []
    for state in ckpt.get("members", []):   # the run's other models (trainer.members)
        other = build_head(cfg, ckpt["dim"])
        other.load_state_dict(state)
        others.append(other.eval())
    return Scorer(model, std, chunks, others), cfg, int(ckpt["dim"])
