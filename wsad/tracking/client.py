"""MLflow, through an explicit client and run id: the one module of wsad that imports it.

No call here touches MLflow's module-global active run or tracking URI, so several runs (two
trainings one after the other, a study's runs in one notebook kernel) each log to their own.
"""
from __future__ import annotations

import getpass
import os
import sys
import tempfile
import threading
from pathlib import Path

from ..errors import WsadError
from .errors import retry

_CLIENTS: dict[str, object] = {}
_LOCK = threading.Lock()


def client(uri: str):
    """One MLflow client per tracking URI in this process. A SQLite store is made whole first
    (:func:`wsad.tracking.sqlite.ensure_sqlite_store`): a client migrates the store it opens,
    and a process killed midway would leave a store that no longer opens."""
    import mlflow

    with _LOCK:
        if uri not in _CLIENTS:
            ensure_store(uri)
            _CLIENTS[uri] = mlflow.MlflowClient(uri)
        return _CLIENTS[uri]


def ensure_store(uri: str) -> None:
    """A SQLite store at ``uri`` made whole, safely beside other processes (nothing for a server)."""
    from .sqlite import ensure_sqlite_store

    ensure_sqlite_store(uri, migrate)


def migrate(path: Path) -> None:
    """Create a fresh SQLite store at ``path`` (runs MLflow's schema migrations, quietly)."""
    import logging

    import mlflow

    for name in ("mlflow.store.db.utils", "alembic.runtime.migration"):
        logging.getLogger(name).setLevel(logging.WARNING)

    mlflow.MlflowClient(f"sqlite:///{path}").search_experiments()


def experiment_id(uri: str, experiment: str) -> str:
    """The id of ``experiment`` at ``uri``, created when missing."""
    c = client(uri)
    exp = retry(lambda: c.get_experiment_by_name(experiment), uri)
    if exp is not None:
        return exp.experiment_id
    try:
        return retry(lambda: c.create_experiment(experiment), uri)
    except Exception:  # noqa: BLE001 - created meanwhile by another process
        return c.get_experiment_by_name(experiment).experiment_id


class TrackedRun:
    """One MLflow run: every call names its id."""

    def __init__(self, uri: str, run_id: str):
        self.uri, self.run_id = uri, run_id
        self._c = client(uri)

    @classmethod
    def start(cls, uri: str, experiment: str, name: str, params: dict[str, str], tags: dict[str, str],
              parent: str | None = None) -> TrackedRun:
        """A new run with its params and tags (a child of run ``parent`` when given)."""
        c = client(uri)
        exp = experiment_id(uri, experiment)
        tags = {"mlflow.user": _user(), "mlflow.source.name": Path(sys.argv[0]).name or "python",
                "mlflow.source.type": "LOCAL", **tags}
        if parent:
            tags["mlflow.parentRunId"] = parent
        info = retry(lambda: c.create_run(exp, run_name=name, tags=tags), uri).info
        run = cls(uri, info.run_id)
        run.log_params(params)
        return run

    @classmethod
    def reopen(cls, uri: str, run_id: str) -> TrackedRun:
        """Continue an existing run (status back to RUNNING)."""
        run = cls(uri, run_id)
        retry(lambda: run._c.update_run(run_id, status="RUNNING"), uri)
        return run

    def log_params(self, params: dict[str, str]) -> None:
        from mlflow.entities import Param

        items = [Param(k, v) for k, v in params.items()]
        for i in range(0, len(items), 90):  # MLflow caps a batch at 100 params
            retry(lambda chunk=items[i:i + 90]: self._c.log_batch(self.run_id, params=chunk), self.uri)

    def log_metrics(self, values: dict[str, float], step: int) -> None:
        self.log_rows([(step, None, values)])

    def log_rows(self, rows: list[tuple[int, int | None, dict[str, float]]]) -> None:
        """Several steps' metrics, ``(step, timestamp in ms or None for now, values)`` each, in as
        few calls as MLflow takes (1000 values per batch): one commit instead of one per step."""
        import time

        from mlflow.entities import Metric

        now = int(time.time() * 1000)
        metrics = [Metric(k, float(v), stamp or now, step) for step, stamp, values in rows
                   for k, v in values.items() if isinstance(v, (int, float)) and v == v]
        for i in range(0, len(metrics), 1000):
            retry(lambda chunk=metrics[i:i + 1000]: self._c.log_batch(self.run_id, metrics=chunk), self.uri)

    def logged_steps(self, key: str) -> set[int]:
        """The steps at which this run has a value of metric ``key``."""
        return {m.step for m in retry(lambda: self._c.get_metric_history(self.run_id, key), self.uri)}

    def set_tag(self, key: str, value: str) -> None:
        retry(lambda: self._c.set_tag(self.run_id, key, value), self.uri)

    def log_store(self, name: str, root: str, fingerprint: str) -> None:
        """The feature store as the run's dataset input; its digest is the store's fingerprint."""
        import time

        from mlflow.entities import Dataset, DatasetInput, InputTag

        ds = Dataset(name=name, digest=fingerprint, source_type="local", source=str(root))
        inputs = [DatasetInput(ds, [InputTag("mlflow.data.context", "training")])]
        for attempt in range(5):
            try:
                return retry(lambda: self._c.log_inputs(self.run_id, datasets=inputs), self.uri)
            except WsadError:
                raise
            except Exception as err:  # noqa: BLE001 - two trials creating the same dataset at once
                if "unique" not in str(err).lower() or attempt == 4:
                    raise
                time.sleep(0.2 * (attempt + 1))   # the other trial made it: linking it now succeeds

    def log_folder(self, folder: Path, skip: tuple[str, ...] = ("state",)) -> None:
        """Upload a run folder's sub-folders (``state/`` holds the resume checkpoint: uploaded
        only when a run is interrupted) and its top-level files."""
        folder = Path(folder)
        for sub in sorted(p for p in folder.iterdir() if p.is_dir() and p.name not in skip):
            retry(lambda: self._c.log_artifacts(self.run_id, str(sub), artifact_path=sub.name), self.uri)
        for f in sorted(p for p in folder.iterdir() if p.is_file() and not p.name.startswith(".")):
            retry(lambda: self._c.log_artifact(self.run_id, str(f)), self.uri)

    def log_file(self, path: Path, folder: str) -> None:
        retry(lambda: self._c.log_artifact(self.run_id, str(path), artifact_path=folder), self.uri)

    def finish(self, status: str = "FINISHED") -> None:
        retry(lambda: self._c.set_terminated(self.run_id, status=status), self.uri)


def _user() -> str:
    """The login a run is logged with: the tracking server's account, else this machine's user."""
    if os.environ.get("MLFLOW_TRACKING_USERNAME"):
        return os.environ["MLFLOW_TRACKING_USERNAME"]
    try:
        return getpass.getuser()
    except Exception:  # noqa: BLE001 - no user name in some containers
        return "unknown"


# --- reading runs back -----------------------------------------------------------------------
def experiment_runs(uri: str, experiment: str, filter_string: str = "") -> list:
    """Every run of ``experiment`` (MLflow Run objects); a missing experiment is one line."""
    c = client(uri)
    exp = retry(lambda: c.get_experiment_by_name(experiment), uri)
    if exp is None:
        names = [e.name for e in c.search_experiments()]
        raise WsadError(f"no experiment {experiment!r} at {uri}; known: {', '.join(names) or 'none'}")
    runs, token = [], None
    while True:
        page = retry(lambda: c.search_runs([exp.experiment_id], filter_string=filter_string,
                                           max_results=1000, page_token=token), uri)
        runs += list(page)
        token = page.token
        if not token:
            return runs


def _no_sqlite_store(uri: str) -> bool:
    """Whether ``uri`` names a SQLite store that does not exist: a run looked up there does not
    exist either, and opening it would create a store the user did not ask for."""
    return uri.startswith("sqlite:///") and not Path(uri[len("sqlite:///"):]).exists()


def get_run(uri: str, run_id: str, missing: str | None = None):
    """The MLflow run ``run_id``, or the one line ``missing`` (by default "no run ... at ...")
    when there is none."""
    missing = missing or f"no run {run_id} at {uri}"
    if _no_sqlite_store(uri):
        raise WsadError(f"{missing} (no tracking store there)")
    try:
        return client(uri).get_run(run_id)
    except Exception:  # noqa: BLE001 - MLflow raises its own types for unknown ids
        raise WsadError(missing) from None


def metric_history(uri: str, run_id: str, key: str) -> list:
    return retry(lambda: client(uri).get_metric_history(run_id, key), uri)


def download(uri: str, run_id: str, path: str, dst: Path) -> Path | None:
    """A run's artifact at ``path`` downloaded under ``dst``; None when the run has none."""
    os.environ.setdefault("MLFLOW_ENABLE_ARTIFACTS_PROGRESS_BAR", "false")
    Path(dst).mkdir(parents=True, exist_ok=True)
    try:
        return Path(client(uri).download_artifacts(run_id, path, str(dst)))
    except Exception:  # noqa: BLE001 - a run without the artifact
        return None


def find_checkpoint(uri: str, run_id: str) -> Path:
    """The resume checkpoint of a run: its local path (tag), else its artifact."""
    run = get_run(uri, run_id, f"trainer.resume={run_id}: no such run at {uri}")
    if run.info.status == "FINISHED":
        raise WsadError(f"run {run_id} already FINISHED; nothing to resume")
    local = run.data.tags.get("wsad.resume_checkpoint")
    if local and Path(local).is_file():
        return Path(local)
    got = download(uri, run_id, "state/resume.pt", Path(tempfile.mkdtemp(prefix="wsad-resume-")))
    if got is None:
        raise WsadError(f"run {run_id} has no resume checkpoint (it stopped before its first "
                        "epoch ended); start it again instead")
    return got


def load() -> None:
    """Import MLflow now (a process about to freeze its imported objects)."""
    import mlflow  # noqa: F401
