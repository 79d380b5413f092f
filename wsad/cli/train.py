"""wsad-train: the Hydra app over conf/ (one run, or -m for a sweep)."""
from __future__ import annotations

import gc
import os
import sys
from pathlib import Path

import hydra
from omegaconf import DictConfig

from .. import registry
from ..errors import WsadError, guarded
from ..resources import CONF_DIR

PROG = "wsad-train"
SHOWN = ("frame_auc", "frame_ap", "anomalous_video_auc", "false_alarm_rate", "video_auc", "video_balanced_accuracy")


@hydra.main(config_path=str(CONF_DIR), config_name="config", version_base="1.3")
def _app(cfg: DictConfig) -> float:
    from hydra.core.hydra_config import HydraConfig

    from ..train import train

    if cfg.tracking.get("enabled", True):
        import mlflow  # noqa: F401 - imported before the freeze below, like torch
    gc.freeze()   # what the imports made (no collection first: it would walk them all)
    overrides = list(HydraConfig.get().overrides.task)
    res = guarded(lambda: train(cfg, overrides), PROG)
    shown = ", ".join(f"{k} {res.metrics[k]:.4f}" for k in SHOWN if k in res.metrics)
    print(f"{PROG}: {shown}\n  artifacts in {res.out_dir}"
          + (f"\n  MLflow run {res.run_id}" if res.run_id else ""))
    _freeze_survivors()
    return res.objective


def _freeze_survivors() -> None:
    """Move every object alive now into the collector's permanent generation (after each run;
    the imports' objects were frozen before it). The full collections of later runs, and
    the interpreter at exit, then skip about a million objects (torch, MLflow, pandas) that
    live to the end anyway: measured here, a 6-run sweep ended 1 s sooner. Objects freed by
    their reference count are freed as before; cycles made by a run are collected first."""
    gc.collect()
    gc.freeze()


def check_arguments(argv: list[str], dirs: list[Path]) -> None:
    """The mistakes Hydra would answer with a screenful, answered in one line:
    an unknown option of a config group, an unknown term, a missing data.root."""
    args = [a for a in argv if not a.startswith("-")]
    keys = {a.split("=", 1)[0].lstrip("+~") for a in args if "=" in a}
    if "data.root" not in keys and "trainer.resume" not in keys and not any(
            a in ("--help", "-h", "--info") or a.startswith("--cfg") for a in argv):
        raise WsadError("data.root=DIR is required (a feature store; make one with wsad-synth or "
                        "wsad-index)")
    terms = registry.options("terms", dirs)
    for a in args:
        if "=" not in a:
            continue
        key, value = a.split("=", 1)
        if key.startswith("objective.") and key.split(".", 1)[1] not in terms:
            raise WsadError(f"{key} is not a term; known terms: {', '.join(terms)} (a term of your "
                            "own: terms/NAME.yaml in a folder on hydra.searchpath; see DEVELOPERS.md)")
        key = key.lstrip("+~")
        if key == "terms":
            raise WsadError("terms is not a group to choose from: every terms/NAME.yaml is a term; "
                            "switch one on with objective.NAME=WEIGHT")
        if key not in registry.GROUPS or "(" in value:
            continue
        known = registry.options(key, dirs)
        for option in value.strip("[]").split(","):
            option = option.strip()
            if option and option not in known:
                raise WsadError(f"{key}={option} is not known; choose one of: {', '.join(known)}")


def main() -> None:
    os.environ.setdefault("WSAD_LAUNCH_DIR", os.getcwd())

    def prepare() -> None:
        dirs = registry.search_dirs(sys.argv[1:])
        registry.register_terms(dirs)
        check_arguments(sys.argv[1:], dirs)

    guarded(prepare, PROG)
    _app()
