"""What a study runs: stores x variants x seeds, each run one list of overrides and one
fingerprint of its resolved config and store (the run's folder name, so finished runs are found
again instead of trained again)."""
from __future__ import annotations

import itertools
import re
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

from ..errors import WsadError
from ..resources import CONF_DIR


@dataclass(frozen=True)
class RunSpec:
    """One run of a study."""

    store: str                     # the store's folder
    store_name: str
    variant: str                   # the variant's label, e.g. "ablation.toggle=smoothness"
    values: tuple                  # the variant's (key, value) pairs
    seed: int
    overrides: tuple[str, ...]     # everything wsad-train would be given
    fingerprint: str               # of the resolved config and the store's content
    config: Any = field(default=None, compare=False, repr=False)   # composed once, when planned


def as_overrides(values: dict | list | tuple | None) -> list[str]:
    """``{"recipe": "windows", "trainer.epochs": 15}`` (or a list of ``key=value``) as overrides."""
    if values is None:
        return []
    if isinstance(values, dict):
        return [f"{k}={_text(v)}" for k, v in values.items()]
    return [str(v) for v in values]


def _text(v: Any) -> str:
    if isinstance(v, bool):
        return str(v).lower()
    if v is None:
        return "null"
    if isinstance(v, (list, tuple)):
        return "[" + ",".join(_text(x) for x in v) + "]"
    return quote(str(v))


def quote(text: str) -> str:
    """A value as Hydra's override grammar reads it back unchanged (quoted when it holds
    characters the grammar gives a meaning, e.g. a path with ``=`` or ``,``)."""
    if not re.search(r"[=,\[\]{}()'\"\s\\$]", text):
        return text
    return "'" + text.replace("\\", "\\\\").replace("'", "\\'") + "'"


def preset(name: str) -> tuple[list[dict], list[int] | None]:
    """A named sweep preset of ``conf/sweep/`` as variants (and seeds, when it sets them)."""
    from omegaconf import OmegaConf

    from ..settings import parse_overrides

    path = Path(CONF_DIR) / "sweep" / f"{name}.yaml"
    known = sorted(p.stem for p in (Path(CONF_DIR) / "sweep").glob("*.yaml"))
    if not path.is_file():
        raise WsadError(f"no sweep preset {name!r}; known: {', '.join(known)}")
    node = OmegaConf.load(path)
    sweeper = OmegaConf.select(node, "hydra.sweeper") or {}
    if "sampler" in sweeper or "direction" in sweeper:
        raise WsadError(f"sweep preset {name!r} is a search, not a grid; run it with wsad-train -m sweep={name}")
    params = dict(sweeper.get("params") or {})
    axes, seeds = {}, None
    for o in parse_overrides([f"{k}={v}" for k, v in params.items()]):
        values = list(o.sweep_iterator()) if o.is_sweep_override() else [o.value()]
        if o.key_or_group == "seed":
            seeds = [int(v) for v in values]
        else:
            axes[o.key_or_group] = values
    return grid(axes), seeds


def grid(axes: dict[str, list]) -> list[dict]:
    """Every combination of the axes' values, in order."""
    if not axes:
        return [{}]
    keys = list(axes)
    lists = [v if isinstance(v, (list, tuple)) else [v] for v in axes.values()]
    return [dict(zip(keys, combo)) for combo in itertools.product(*lists)]


def expand_variants(variants: str | dict | list | None) -> tuple[list[dict], list[int] | None]:
    """Variants from a preset name, a grid (``{key: [values]}``) or an explicit list of dicts;
    and the seeds a preset sets (None otherwise)."""
    if variants is None:
        return [{}], None
    if isinstance(variants, str):
        return preset(variants)
    if isinstance(variants, dict):
        return grid(variants), None
    out = [dict(v) for v in variants]
    if not all(isinstance(v, dict) for v in variants):
        raise WsadError("variants: give a preset name, a grid {key: [values]} or a list of {key: value} dicts")
    return out, None


def label(values: dict) -> str:
    """``key=value, key=value`` (``base`` for the base configuration itself)."""
    return ", ".join(f"{k}={_text(v)}" for k, v in values.items()) or "base"


def stores_of(stores) -> dict[str, str]:
    """{name: folder} from one folder, a list of folders or a {name: folder} mapping."""
    if isinstance(stores, (str, Path)):
        stores = [stores]
    if isinstance(stores, dict):
        out = {str(k): str(v) for k, v in stores.items()}
    else:
        out, seen = {}, set()
        for s in stores:
            name, k = Path(s).name, 2
            while name in seen:
                name, k = f"{Path(s).name}_{k}", k + 1
            seen.add(name)
            out[name] = str(s)
    for name, root in out.items():
        if not (Path(root) / "store.json").is_file():
            raise WsadError(f"store {name}: {root} is not a feature store (no store.json; make one with "
                            "wsad-synth or wsad-index)")
    if not out:
        raise WsadError("a study needs at least one store")
    return out
