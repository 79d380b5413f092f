"""Composing the training config outside the command line (tests, notebooks)."""
from __future__ import annotations

from hydra import compose, initialize_config_dir
from hydra.core.global_hydra import GlobalHydra
from omegaconf import DictConfig

from .registry import register_terms, search_dirs
from .resources import CONF_DIR
from .settings import check_overrides

__all__ = ["CONF_DIR", "compose_config"]


def compose_config(overrides: list[str] | None = None, return_hydra_config: bool = False) -> DictConfig:
    """The config ``wsad-train`` would run with these overrides, e.g.
    ``compose_config(["data.root=store", "recipe=windows", "bags.order=sequential"])``.
    Terms in folders named by a ``hydra.searchpath=[file://...]`` override are known too.
    A misspelt key or a value of the wrong type is a :class:`~wsad.errors.WsadError` naming it."""
    overrides = list(overrides or [])
    check_overrides(overrides)
    register_terms(search_dirs(overrides))
    GlobalHydra.instance().clear()
    try:
        with initialize_config_dir(config_dir=str(CONF_DIR), version_base="1.3"):
            return compose(config_name="config", overrides=overrides,
                           return_hydra_config=return_hydra_config)
    finally:
        GlobalHydra.instance().clear()
