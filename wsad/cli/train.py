"""wsad-train: the Hydra app over conf/ (one run, or -m for a sweep)."""
from __future__ import annotations

import os
import sys

import hydra
from omegaconf import DictConfig

from .. import PROJECT_ROOT
from ..errors import WsadError


@hydra.main(config_path=str(PROJECT_ROOT / "conf"), config_name="config", version_base="1.3")
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
    from ..train import train as t

    r = t.last_result
    shown = ", ".join(f"{k} {r[k]:.4f}" for k in ("frame_auc", "frame_ap", "anomalous_video_auc",
                                                  "false_alarm_rate", "video_auc") if k in r)
    print(f"wsad-train: {shown}\n  artifacts in {r['out_dir']}"
          + (f"\n  MLflow run {r['run_id']}" if r.get("run_id") else ""))
    return value


def main() -> None:
    os.environ.setdefault("WSAD_LAUNCH_DIR", os.getcwd())
    _app()
