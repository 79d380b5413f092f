"""The components wsad knows: one YAML per component in a config folder.

A bag construction, head, pooling or optimiser is an option of its Hydra
group (``conf/<group>/<name>.yaml``, one chosen per run). Terms are many at
once: every ``terms/<name>.yaml`` found on the search path (wsad's own
``conf/`` plus the folders a user adds with ``hydra.searchpath``) is a term
named ``<name>``, with weight ``objective.<name>`` (0 unless a recipe or an
override sets it). Every list of known names (command-line checks, ablation
toggles, error messages) is read from these folders, so adding a component
is one module plus one YAML.
"""
from __future__ import annotations

from importlib.resources import files
from pathlib import Path
from typing import Any

from omegaconf import OmegaConf

from .errors import WsadError
from .resources import CONF_DIR

#: Groups with one option chosen per run.
GROUPS = ("data", "bags", "head", "pooling", "optim", "schedule", "trainer", "evaluate", "tracking", "recipe", "sweep")
#: A term's YAML key that is not a constructor argument: the weight ``ablation.toggle`` gives it.
ABLATION_KEY = "ablation_weight"
#: The config node the terms are registered as (``conf/config.yaml`` names it in its defaults).
TERMS_NODE = "registered_terms"


def search_dirs(overrides: list[str] | None = None) -> list[Path]:
    """wsad's config folder, then the folders of a ``hydra.searchpath=[...]``
    override (``file://`` paths or ``pkg://`` packages), in Hydra's order."""
    dirs = [CONF_DIR]
    for entry in _searchpath(overrides or []):
        if entry.startswith("file://"):
            dirs.append(Path(entry[len("file://"):]))
        elif entry.startswith("pkg://"):
            try:
                dirs.append(Path(str(files(entry[len("pkg://"):]))))
            except (ImportError, TypeError):
                raise WsadError(f"hydra.searchpath entry {entry}: no such package") from None
    return dirs


def _searchpath(overrides: list[str]) -> list[str]:
    from .settings import parse_overrides

    for o in parse_overrides([x for x in overrides if x.lstrip("+~").startswith("hydra.searchpath=")]):
        value = o.value()
        return [str(v) for v in (value if isinstance(value, list) else [value])]
    return []


def options(group: str, dirs: list[Path] | None = None) -> list[str]:
    """Known options of a config group, from every folder on the search path."""
    found = {p.stem for d in (dirs or [CONF_DIR]) for p in (Path(d) / group).glob("*.yaml")}
    return sorted(found)


def term_configs(dirs: list[Path] | None = None) -> dict[str, dict[str, Any]]:
    """Every term's YAML as a dict, by name; the first folder holding a name wins."""
    out: dict[str, dict[str, Any]] = {}
    for d in dirs or [CONF_DIR]:
        for path in sorted((Path(d) / "terms").glob("*.yaml")):
            if path.stem in out:
                continue
            try:
                node = OmegaConf.to_container(OmegaConf.load(path))
            except Exception as err:  # noqa: BLE001 - YAML errors come in many types
                raise WsadError(f"term file {path} is not valid YAML ({err})") from None
            if not isinstance(node, dict) or "_target_" not in node:
                raise WsadError(f"term file {path} must hold a mapping with _target_ "
                                "(the term's class, e.g. my_package.terms.MyTerm)")
            out[path.stem] = node
    return out


def register_terms(dirs: list[Path] | None = None) -> list[str]:
    """Put the known terms into Hydra's config store as ``registered_terms``:
    ``terms.<name>`` (settings), ``objective.<name>`` = 0 and
    ``ablation.on_weight.<name>``, and the typed groups' schemas
    (:func:`wsad.settings.register_schemas`). Call before composing a config."""
    from hydra.core.config_store import ConfigStore

    from .settings import register_schemas

    register_schemas()

    configs = term_configs(dirs)
    settings = {n: {k: v for k, v in c.items() if k != ABLATION_KEY} for n, c in configs.items()}
    node = {"terms": settings, "objective": {n: 0.0 for n in configs},
            "ablation": {"on_weight": {n: float(c.get(ABLATION_KEY, 1.0)) for n, c in configs.items()}}}
    ConfigStore.instance().store(name=TERMS_NODE, node=node, package="_global_")
    return list(configs)


def build_component(node, what: str, **kwargs) -> Any:
    """``instantiate`` with errors as one line: a component's own WsadError
    passes through; anything else names the component and its target."""
    from hydra.errors import InstantiationException
    from hydra.utils import instantiate

    try:
        return instantiate(node, **kwargs)
    except InstantiationException as err:
        cause = err.__cause__
        if isinstance(cause, WsadError):
            raise cause from None
        target = node.get("_target_", "?") if hasattr(node, "get") else "?"
        detail = str(cause or err).strip().splitlines()[-1]
        raise WsadError(f"could not build {what} ({target}): {detail}") from None
