"""MLflow as a sink: the run's params when it starts, epoch rows as it trains, final metrics
and the run folder's files when it ends, its status, all through the run's own id."""
from __future__ import annotations

from concurrent.futures import ThreadPoolExecutor
from pathlib import Path

from omegaconf import DictConfig

from ..tracking import resolve_uri, run_name, run_params, standard_tags
from ..tracking.client import TrackedRun
from ..tracking.parent import parent_run_id
from .base import Outcome, Row, Sink


class TrackingSink(Sink):
    """One MLflow run: started (a child of the sweep's parent run inside a sweep) or, with
    ``resume_id``, reopened.

    The start runs in a background thread while the run builds and trains its first epoch:
    importing MLflow, opening (or creating) its store and making the run cost seconds that a
    short run would otherwise wait for. Tags are sent in order behind the start; epoch rows,
    the outcome and the status wait for it; epoch rows made while it is still on its way are
    queued behind it. A start that failed (a server away, refused credentials) raises its own
    error at the next of those, once, with the run's resume state already on disk; ``run_id``
    is then None."""

    def __init__(self, cfg: DictConfig, overrides: list[str] | None, store_root: str, fingerprint: str,
                 resume_id: str | None = None):
        uri = resolve_uri(str(cfg.tracking.uri))
        about = (str(cfg.tracking.experiment), run_name(cfg, overrides), run_params(cfg, fingerprint),
                 standard_tags(fingerprint), Path(str(store_root)).name, str(store_root), fingerprint)
        self.run: TrackedRun | None = None
        self._error: BaseException | None = None
        self._pool = ThreadPoolExecutor(1, thread_name_prefix="wsad-tracking")
        self._queued = [self._pool.submit(self._start, uri, resume_id, about)]

    def _start(self, uri: str, resume_id: str | None, about: tuple) -> None:
        from ..tracking.client import TrackedRun  # MLflow is imported here, off the main thread

        if resume_id:
            self.run = TrackedRun.reopen(uri, str(resume_id))
            return
        experiment, name, params, tags, store_name, root, fingerprint = about
        run = TrackedRun.start(uri, experiment, name, params, tags, parent=parent_run_id())
        run.log_store(store_name, root, fingerprint)
        self.run = run

    def _ready(self) -> TrackedRun:
        """The started run, once everything queued before is sent (the start's error, if any)."""
        queued, self._queued = self._queued, []
        for f in queued:
            try:
                f.result()
            except BaseException as err:  # noqa: BLE001 - kept, raised below and at every later call
                self._error = self._error or err
        if self._error is not None:
            raise self._error
        return self.run

    @property
    def run_id(self) -> str | None:  # type: ignore[override]
        try:
            return self._ready().run_id
        except BaseException:  # noqa: BLE001 - the start failed: no run to name
            return None

    def tag(self, key: str, value: str) -> None:
        self._queued.append(self._pool.submit(lambda: self.run and self.run.set_tag(key, value)))

    def log_rows(self, rows: list[Row]) -> None:
        if self._queued and not self._queued[0].done():
            # the start is still on its way (a sweep's launcher making the store or the parent
            # run): the rows go behind it, the epochs go on; a failed start drops them and is
            # raised at the next call, and a resume sends every row not logged
            self._queued.append(self._pool.submit(lambda: self.run and self.run.log_rows(rows)))
            return
        self._ready().log_rows(rows)

    def logged_steps(self, key: str) -> set[int]:
        return self._ready().logged_steps(key)

    def publish(self, o: Outcome) -> None:
        run = self._ready()
        run.log_metrics(o.metrics, step=o.step)
        run.log_folder(o.out_dir)

    def close(self, status: str, state: Path | None = None) -> None:
        try:
            run = self._ready()
        except BaseException:
            if status == "FINISHED":
                raise
            return   # the run never started in MLflow: nothing to close there
        finally:
            self._pool.shutdown(wait=False)
        if status == "KILLED" and state is not None and Path(state).is_file():
            run.log_file(state, "state")   # so another machine can continue the run
        run.finish(status)
