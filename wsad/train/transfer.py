"""Other sites' stores a run's selected model is scored on (``evaluate.stores``)."""
from __future__ import annotations

from pathlib import Path

from omegaconf import DictConfig

from ..errors import WsadError
from ..store import FeatureStore


def transfer_stores(cfg: DictConfig) -> list[tuple[str, FeatureStore]]:
    """The stores of ``evaluate.stores``, named by folder (made unique), checked against the
    training store's feature dim before any training starts."""
    paths = list((cfg.get("evaluate") or {}).get("stores") or [])
    if not paths:
        return []
    dim = FeatureStore(cfg.data.root).dim
    out, names = [], set()
    for p in paths:
        if not Path(str(p)).is_dir():
            raise WsadError(f"evaluate.stores: {p} is not a folder (give feature stores, e.g. made by wsad-synth)")
        store = FeatureStore(str(p), crops=cfg.data.crops)
        if store.dim != dim:
            raise WsadError(f"evaluate.stores: {p} has {store.dim}-d features but the training store "
                            f"{cfg.data.root} has {dim}-d; transfer needs the same backbone's features")
        if not store.videos("test"):
            raise WsadError(f"evaluate.stores: {p} has no test videos to score")
        name, k = Path(str(p)).resolve().name, 2
        while name in names:
            name, k = f"{Path(str(p)).resolve().name}_{k}", k + 1
        names.add(name)
        out.append((name, store))
    return out
