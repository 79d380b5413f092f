"""wsad-train: the Hydra app over conf/ (one run, or -m for a sweep)."""
from __future__ import annotations

import os
import sys

import hydra
from omegaconf import DictConfig

from .. import PROJECT_ROOT
from ..errors import WsadError

CONF = PROJECT_ROOT / "conf"
GROUPS = ("data", "bags", "head", "objective", "terms", "optim", "trainer", "tracking", "recipe",
          "sweep")


@hydra.main(config_path=str(CONF), config_name="config", version_base="1.3")
def _app(cfg: DictConfig) -> float:
    from hydra.core.hydra_config import HydraConfig

    from ..train import train

    overrides = list(HydraConfig.get().overrides.task)
    try:
        value = train(cfg, overrides)
    except WsadError as err:
        if os.environ.get("WSAD_DEBUG", "") not in ("", "0"):
            raise
        print(f"wsad-train: {'error: ' if err.exit_code == 2 else ''}{err}", file=sys.stderr)
        sys.exit(err.exit_code)
    except Exception as err:  # unexpected: still one line unless WSAD_DEBUG=1
        if os.environ.get("WSAD_DEBUG", "") not in ("", "0"):
            raise
        print(f"wsad-train: internal error: {type(err).__name__}: {err} "
              "(set WSAD_DEBUG=1 for the traceback)", file=sys.stderr)
        sys.exit(1)
    r = train.last_result
    shown = ", ".join(f"{k} {r[k]:.4f}" for k in ("frame_auc", "frame_ap", "anomalous_video_auc",
                                                  "false_alarm_rate", "video_auc") if k in r)
    print(f"wsad-train: {shown}\n  artifacts in {r['out_dir']}"
          + (f"\n  MLflow run {r['run_id']}" if r.get("run_id") else ""))
    return value


def check_arguments(argv: list[str]) -> None:
    """The mistakes Hydra would answer with a screenful, answered in one line:
    an unknown option of a config group, and a missing data.root."""
    args = [a for a in argv if not a.startswith("-")]
    keys = {a.split("=", 1)[0].lstrip("+~") for a in args if "=" in a}
    if "data.root" not in keys and "trainer.resume" not in keys and not any(
            a in ("--help", "-h", "--cfg", "--info") or a.startswith("--cfg") for a in argv):
        raise WsadError("data.root=DIR is required (a feature store; make one with wsad-synth or "
                        "wsad-index)")
    import yaml

    terms = list(yaml.safe_load((CONF / "objective" / "default.yaml").read_text()))
    for a in args:
        if "=" not in a:
            continue
        key, value = a.split("=", 1)
        if key.startswith("objective.") and key.split(".", 1)[1] not in terms:
            raise WsadError(f"{key} is not a term; known terms: {', '.join(terms)} "
                            "(a term of your own: +objective.NAME=W with +terms.NAME._target_=...)")
        key = key.lstrip("+~")
        if key not in GROUPS or "(" in value:
            continue
        for option in value.strip("[]").split(","):
            option = option.strip()
            if option and not (CONF / key / f"{option}.yaml").is_file():
                known = sorted(p.stem for p in (CONF / key).glob("*.yaml"))
                raise WsadError(f"{key}={option} is not known; choose one of: {', '.join(known)}")


def main() -> None:
    os.environ.setdefault("WSAD_LAUNCH_DIR", os.getcwd())
    try:
        check_arguments(sys.argv[1:])
    except WsadError as err:
        print(f"wsad-train: error: {err}", file=sys.stderr)
        sys.exit(2)
    _app()
