"""Composing the training config outside the command line (tests, notebooks)."""
from __future__ import annotations

from hydra import compose, initialize_config_dir
from hydra.core.global_hydra import GlobalHydra
from omegaconf import DictConfig

from . import PROJECT_ROOT

CONF_DIR = PROJECT_ROOT / "conf"


def compose_config(overrides: list[str] | None = None) -> DictConfig:
    """The config ``wsad-train`` would run with these overrides, e.g.
    ``compose_config(["data.root=store", "recipe=windows", "bags.order=sequential"])``."""
    GlobalHydra.instance().clear()
    with initialize_config_dir(config_dir=str(CONF_DIR), version_base="1.3"):
        return compose(config_name="config", overrides=list(overrides or []))
