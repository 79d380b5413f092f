"""Scenario recipes: YAML files in ``synthetic/`` merged over key=value overrides."""
from __future__ import annotations

from pathlib import Path

import yaml
from omegaconf import DictConfig, OmegaConf, open_dict
from omegaconf.errors import OmegaConfBaseException

from ..errors import WsadError
from ..resources import SCENARIO_DIR

#: Keys a recipe may leave out (their defaults), which an override can still set.
OPTIONAL = {"fps": 25, "site": 1}


def scenario_names() -> list[str]:
    return sorted(p.stem for p in SCENARIO_DIR.glob("*.yaml"))


def load_scenario(name: str, overrides: list[str] | None = None) -> DictConfig:
    """Load scenario ``name`` (or a path to a YAML file) and apply overrides.

    Overrides are ``key=value`` with dotted keys (``events.snr=3``); unknown
    keys are refused with the list of known ones.
    """
    path = Path(name)
    if not (path.suffix in (".yaml", ".yml") and path.is_file()):
        path = SCENARIO_DIR / f"{name}.yaml"
    if not path.is_file():
        raise WsadError(f"unknown scenario {name!r}; known: {', '.join(scenario_names())} "
                        "(or give a path to a .yaml recipe)")
    try:
        cfg = OmegaConf.load(path)
    except Exception as err:  # noqa: BLE001 - YAML errors come in many types
        raise WsadError(f"scenario file {path} is not valid YAML ({err})") from None
    OmegaConf.set_struct(cfg, True)
    for item in overrides or []:
        if "=" not in item:
            raise WsadError(f"override {item!r} is not key=value")
        key, value = item.split("=", 1)
        if key in OPTIONAL and key not in cfg:
            with open_dict(cfg):
                cfg[key] = OPTIONAL[key]
        if OmegaConf.select(cfg, key, default="__absent__") == "__absent__":
            top = ", ".join(sorted(cfg.keys()))
            raise WsadError(f"scenario has no key {key!r}; top-level keys: {top}")
        try:
            OmegaConf.update(cfg, key, yaml.safe_load(value), merge=False)
        except (OmegaConfBaseException, yaml.YAMLError) as err:
            raise WsadError(f"override {item!r} does not fit the scenario ({err})") from None
    _validate(cfg)
    return cfg


def _validate(cfg: DictConfig) -> None:
    def need(cond: bool, msg: str) -> None:
        if not cond:
            raise WsadError(f"scenario {cfg.get('name', '?')}: {msg}")

    need(int(cfg.dim) >= 2, "dim must be at least 2")
    need(0 < float(cfg.get("fps", 25)) < 10_000, "fps must be a positive number of frames per second")
    need(isinstance(cfg.get("site", 1), int) and int(cfg.get("site", 1)) >= 1,
         "site must be a whole number >= 1 (1: the first site; others redraw cameras and backgrounds)")
    need(str(cfg.dtype) in ("float16", "float32"), "dtype must be float16 or float32")
    need(int(cfg.crops) >= 1, "crops must be >= 1")
    need(0.0 <= float(cfg.rho) < 1.0, "rho must lie in [0, 1)")
    need(0.0 <= float(cfg.camera_share) <= 1.0, "camera_share must lie in [0, 1]")
    need(0.0 <= float(cfg.anomalous_share) <= 1.0, "anomalous_share must lie in [0, 1]")
    need(0.0 <= float(cfg.label_noise) < 0.5, "label_noise must lie in [0, 0.5)")
    need(int(cfg.length.min) >= 1 and int(cfg.length.max) >= int(cfg.length.min),
         "length.min must be >= 1 and <= length.max")
    need(len(cfg.cameras) > 0, "cameras must list at least one scene context")
    need(int(cfg.events.per_video.min) >= 1, "events.per_video.min must be >= 1")
    need(float(cfg.events.snr) >= 0, "events.snr must be >= 0")
    for t, spec in cfg.events.types.items():
        for ctx in list(spec.get("anomalous_in", [])) + list(spec.get("normal_in", [])):
            need(ctx in cfg.cameras, f"event type {t} names unknown context {ctx!r}")
