"""What a run records about itself: flattened params, a readable name, tags; and which
params are bookkeeping (where or how a run ran, never what it computes)."""
from __future__ import annotations

import subprocess

from omegaconf import DictConfig, OmegaConf

from .. import __version__
from ..resources import source_checkout
from ..settings import bookkeeping_keys, parse_overrides

#: Params (prefixes) that cannot change a result: left out of run names and never taken as what
#: tells variants apart in a report. The typed settings mark theirs (:mod:`wsad.settings`);
#: the rest are what a run records beside its config.
BOOKKEEPING = ("seed", "wsad.version", "hydra", "choice.sweep", "choice.tracking", *bookkeeping_keys())


def flatten(cfg: DictConfig | dict, prefix: str = "") -> dict[str, str]:
    """{"head.hidden": "[512, 32]", ...} from a nested config (resolved)."""
    data = OmegaConf.to_container(cfg, resolve=True) if isinstance(cfg, DictConfig) else cfg
    out: dict[str, str] = {}
    for k, v in data.items():
        key = f"{prefix}{k}"
        if isinstance(v, dict):
            out.update(flatten(v, key + "."))
        else:
            out[key] = str(v)[:500]
    return out


def run_name(cfg: DictConfig, overrides: list[str] | None) -> str:
    """``recipe changed=overrides seed=N`` (bookkeeping overrides left out), or tracking.run_name."""
    if cfg.tracking.get("run_name"):
        return str(cfg.tracking.run_name)
    parts = [str(cfg.get("recipe_name", "run"))]
    for o, text in zip(parse_overrides(list(overrides or [])), overrides or []):
        key = o.key_or_group
        if key == "recipe" or key.startswith(BOOKKEEPING):
            continue
        parts.append(text.lstrip("+~"))
    parts.append(f"seed={cfg.seed}")
    return " ".join(parts)


def settings_fingerprint(cfg: DictConfig, store_fingerprint: str) -> str:
    """A short hash of everything that can change what a run computes: the resolved config
    without its bookkeeping keys (:func:`wsad.settings.bookkeeping_keys`), and the store's
    content. Two runs with the same fingerprint compute the same thing."""
    import hashlib
    import json

    skip = (*bookkeeping_keys(), "hydra")
    kept = {k: v for k, v in flatten(cfg).items() if not k.startswith(skip)}
    text = json.dumps({"config": kept, "store": store_fingerprint}, sort_keys=True)
    return hashlib.sha256(text.encode()).hexdigest()[:16]


def hydra_choices() -> dict[str, str]:
    """The config-group options a Hydra run was composed from (bags=pairs, ...)."""
    try:
        from hydra.core.hydra_config import HydraConfig

        choices = HydraConfig.get().runtime.choices
    except Exception:  # noqa: BLE001 - not running under Hydra
        return {}
    return {k: v for k, v in choices.items() if not k.startswith("hydra") and v is not None}


def run_params(cfg: DictConfig, fingerprint: str) -> dict[str, str]:
    """The flattened config plus seed, store fingerprint, version and the Hydra choices."""
    params = flatten(cfg)
    params.update({"seed": str(cfg.seed), "data.fingerprint": fingerprint, "wsad.version": __version__})
    params.update({f"choice.{k}": str(v) for k, v in hydra_choices().items()})
    return params


def git_commit() -> str | None:
    """The commit of the checkout wsad runs from (None for an installed wheel)."""
    root = source_checkout()
    if root is None:
        return None
    try:
        out = subprocess.run(["git", "rev-parse", "HEAD"], cwd=root, capture_output=True,
                             text=True, timeout=5)
        return out.stdout.strip() or None if out.returncode == 0 else None
    except (OSError, subprocess.SubprocessError):
        return None


def standard_tags(fingerprint: str) -> dict[str, str]:
    tags = {"wsad.version": __version__, "wsad.store_fingerprint": fingerprint}
    commit = git_commit()
    if commit:
        tags["mlflow.source.git.commit"] = commit
    return tags
