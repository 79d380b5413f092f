"""MLflow as a sink: the run's params when it starts, epoch rows as it trains, final metrics
and the run folder's files when it ends, its status, all through the run's own id."""
from __future__ import annotations

from pathlib import Path

from omegaconf import DictConfig

from ..tracking import resolve_uri, run_name, run_params, standard_tags
from ..tracking.client import TrackedRun
from ..tracking.parent import parent_run_id
from .base import Outcome, Row, Sink


class TrackingSink(Sink):
    """One MLflow run: started (a child of the sweep's parent run inside a sweep) or, with
    ``resume_id``, reopened."""

    def __init__(self, cfg: DictConfig, overrides: list[str] | None, store_root: str, fingerprint: str,
                 resume_id: str | None = None):
        uri = resolve_uri(str(cfg.tracking.uri))
        if resume_id:
            self.run = TrackedRun.reopen(uri, str(resume_id))
        else:
            self.run = TrackedRun.start(uri, str(cfg.tracking.experiment), run_name(cfg, overrides),
                                        run_params(cfg, fingerprint), standard_tags(fingerprint),
                                        parent=parent_run_id())
            self.run.log_store(Path(str(store_root)).name, str(store_root), fingerprint)
        self.run_id = self.run.run_id

    def tag(self, key: str, value: str) -> None:
        self.run.set_tag(key, value)

    def log_rows(self, rows: list[Row]) -> None:
        self.run.log_rows(rows)

    def logged_steps(self, key: str) -> set[int]:
        return self.run.logged_steps(key)

    def publish(self, o: Outcome) -> None:
        self.run.log_metrics(o.metrics, step=o.step)
        self.run.log_folder(o.out_dir)

    def close(self, status: str, state: Path | None = None) -> None:
        if status == "KILLED" and state is not None and Path(state).is_file():
            self.run.log_file(state, "state")   # so another machine can continue the run
        self.run.finish(status)
