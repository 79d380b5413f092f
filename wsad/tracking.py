"""MLflow logging: store set-up done once, retries on a busy SQLite store,
flattened params, readable run names."""
from __future__ import annotations

import os
import re
import subprocess
import time
from collections.abc import Callable
from pathlib import Path
from typing import Any

from omegaconf import DictConfig, OmegaConf

from . import __version__
from .errors import WsadError
from .resources import source_checkout
from .tracking_store import ensure_sqlite_store

#: Params (prefixes) that say where or how a run ran, never what it is: left out of
#: run names and never taken as what tells variants apart in a report.
BOOKKEEPING = ("seed", "data.root", "data.fingerprint", "tracking.", "trainer.progress",
               "trainer.out_dir", "trainer.resume", "trainer.threads", "wsad.version", "hydra",
               "choice.sweep", "choice.tracking")


class TrackingUnavailable(WsadError):
    """The tracking server stopped answering (past the MLflow client's own HTTP retries)."""

    exit_code = 75   # EX_TEMPFAIL (sysexits.h): a temporary failure, try again later


_DOWN = ("max retries exceeded", "connection refused", "failed to establish a new connection",
         "connectionerror", "read timed out", "remotedisconnected", "connection aborted")


def _tracking_error(err: Exception) -> WsadError | None:
    """What an MLflow failure means to the user, in one line, or None (not a server problem).
    Only an HTTP server answers with a status; codes count as whole numbers, so a run id that
    happens to hold "401" is not read as a refused login."""
    import mlflow

    uri = mlflow.get_tracking_uri()
    if not uri.startswith(("http://", "https://")):
        return None
    text = f"{type(err).__name__}: {err}"
    low = text.lower()
    codes = set(re.findall(r"(?<![\w.:])(40[13]|50[234])(?![\w.])", low))
    user = os.environ.get("MLFLOW_TRACKING_USERNAME")
    if "401" in codes or "unauthorized" in low or "not authenticated" in low:
        who = f"the password of user {user!r}" if user else "a request without credentials"
        return WsadError(f"the tracking server at {uri} refused {who} (HTTP 401): set MLFLOW_TRACKING_USERNAME "
                         "and MLFLOW_TRACKING_PASSWORD to an account it knows")
    if "403" in codes or "permission_denied" in low:
        return WsadError(f"the tracking server at {uri} does not let user {user!r} do this (HTTP 403): ask its "
                         "admin for EDIT permission on the experiment")
    if codes & {"502", "503", "504"} or any(k in low for k in _DOWN):
        return TrackingUnavailable(f"the tracking server at {uri} does not answer ({text.splitlines()[0][:160]})")
    return None


def retry(fn: Callable[[], Any], attempts: int = 8, delay: float = 0.25) -> Any:
    """Call fn, retrying briefly while SQLite reports the database is locked; a server that
    refuses the credentials or stops answering becomes one clear :class:`WsadError`."""
    for i in range(attempts):
        try:
            return fn()
        except WsadError:
            raise
        except Exception as err:  # noqa: BLE001 - MLflow wraps the driver's error types
            if "locked" not in str(err).lower() or i == attempts - 1:
                meaning = _tracking_error(err)
                if meaning is not None:
                    raise meaning from None
                raise
            time.sleep(delay * (2 ** i))
    return None


def prepare(uri: str, experiment: str) -> str:
    """Create (or open) the tracking store and the experiment; returns its id.

    Call this once before parallel workers start: several processes opening
    a fresh SQLite store at once race on its schema migration.
    """
    import mlflow

    ensure_sqlite_store(uri)
    mlflow.set_tracking_uri(uri)
    client = mlflow.MlflowClient(uri)
    exp = retry(lambda: client.get_experiment_by_name(experiment))
    if exp is not None:
        return exp.experiment_id
    try:
        return retry(lambda: client.create_experiment(experiment))
    except Exception:  # noqa: BLE001 - created meanwhile by another process
        return client.get_experiment_by_name(experiment).experiment_id


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
    if cfg.tracking.get("run_name"):
        return str(cfg.tracking.run_name)
    parts = [str(cfg.get("recipe_name", "run"))]
    for o in overrides or []:
        key = o.lstrip("+~").split("=", 1)[0]
        if key in ("recipe",) or key.startswith(BOOKKEEPING):
            continue
        parts.append(o.lstrip("+~"))
    parts.append(f"seed={cfg.seed}")
    return " ".join(parts)


def hydra_choices() -> dict[str, str]:
    """The config-group options a Hydra run was composed from (bags=pairs, ...)."""
    try:
        from hydra.core.hydra_config import HydraConfig

        choices = HydraConfig.get().runtime.choices
    except Exception:  # noqa: BLE001 - not running under Hydra
        return {}
    return {k: v for k, v in choices.items() if not k.startswith("hydra") and v is not None}


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


def log_artifacts(local_dir: Path) -> None:
    import mlflow

    # state/ holds the resume checkpoint: uploaded only when a run is interrupted
    for sub in sorted(p for p in Path(local_dir).iterdir() if p.is_dir() and p.name != "state"):
        retry(lambda: mlflow.log_artifacts(str(sub), artifact_path=sub.name))


def resolve_uri(uri: str) -> str:
    """Relative sqlite paths are taken from the directory the user ran in
    (Hydra may change the working directory)."""
    if uri.startswith("sqlite:///") and not uri.startswith("sqlite:////"):
        base = os.environ.get("WSAD_LAUNCH_DIR") or os.getcwd()
        return "sqlite:///" + str(Path(base) / uri[len("sqlite:///"):])
    return uri


class Run:
    """An active MLflow run (thin: the id and the client calls we use)."""

    def __init__(self, run_id: str):
        self.run_id = run_id


def start_run(cfg: DictConfig, overrides: list[str] | None, fingerprint: str) -> Run:
    import mlflow

    uri = resolve_uri(str(cfg.tracking.uri))
    exp_id = prepare(uri, str(cfg.tracking.experiment))
    mlflow.set_tracking_uri(uri)
    params = flatten(cfg)
    params.update({"seed": str(cfg.seed), "data.fingerprint": fingerprint,
                   "wsad.version": __version__})
    params.update({f"choice.{k}": str(v) for k, v in hydra_choices().items()})
    active = retry(lambda: mlflow.start_run(experiment_id=exp_id, run_name=run_name(cfg, overrides),
                                            tags=standard_tags(fingerprint)))
    items = list(params.items())
    for i in range(0, len(items), 90):  # MLflow caps a batch at 100 params
        retry(lambda chunk=dict(items[i:i + 90]): mlflow.log_params(chunk))
    return Run(active.info.run_id)


def log_metrics(run: Run | None, values: dict[str, float], step: int) -> None:
    if run is None:
        return
    import mlflow

    clean = {k: float(v) for k, v in values.items()
             if isinstance(v, (int, float)) and v == v}
    retry(lambda: mlflow.log_metrics(clean, step=step))


def log_rows(run: Run | None, rows: list[tuple[int, int, dict[str, float]]]) -> None:
    """Several steps' metrics, ``(step, timestamp in ms, values)`` each, in as few calls as
    MLflow takes (1000 values per batch): one commit instead of one per step."""
    if run is None or not rows:
        return
    import mlflow
    from mlflow.entities import Metric

    metrics = [Metric(k, float(v), stamp, step) for step, stamp, values in rows for k, v in values.items()
               if isinstance(v, (int, float)) and v == v]
    client = mlflow.MlflowClient()
    for i in range(0, len(metrics), 1000):
        retry(lambda chunk=metrics[i:i + 1000]: client.log_batch(run.run_id, metrics=chunk))


def logged_steps(run: Run | None, key: str) -> set[int]:
    """The steps at which ``run`` has a value of metric ``key``."""
    if run is None:
        return set()
    import mlflow

    client = mlflow.MlflowClient()
    return {m.step for m in retry(lambda: client.get_metric_history(run.run_id, key))}


def finish(run: Run | None, out_dir: Path | None, status: str = "FINISHED") -> None:
    """Upload the artifacts (if any) and close the run with ``status``."""
    if run is None:
        return
    import mlflow

    if out_dir is not None:
        log_artifacts(out_dir)
    if mlflow.active_run() is not None:
        retry(lambda: mlflow.end_run(status=status))


def reopen_run(uri: str, run_id: str) -> Run:
    """Continue an existing run (status back to RUNNING)."""
    import mlflow

    mlflow.set_tracking_uri(resolve_uri(uri))
    active = retry(lambda: mlflow.start_run(run_id=run_id))
    return Run(active.info.run_id)


def set_tag(run: Run | None, key: str, value: str) -> None:
    if run is None:
        return
    import mlflow

    retry(lambda: mlflow.set_tag(key, value))


def log_state(run: Run | None, path: Path) -> None:
    """Upload the resume checkpoint (so another machine can continue the run)."""
    if run is None or not Path(path).is_file():
        return
    import mlflow

    retry(lambda: mlflow.log_artifact(str(path), artifact_path="state"))
