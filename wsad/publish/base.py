"""What a finished run publishes (:class:`Outcome`) and where to (:class:`Sink`).

A run computes, then publishes: the run folder, MLflow, or nothing. A sink receives the
epoch rows while the run trains (for live curves), its outcome when it ends, and its end
status; every method does nothing unless a sink needs it.
"""
from __future__ import annotations

from dataclasses import dataclass, field
from pathlib import Path

from omegaconf import DictConfig

from ..data.scorer import Scorer
from ..evaluate import Evaluation

#: An epoch row as sinks take it: (step, timestamp in ms or None for now, values).
Row = tuple[int, "int | None", dict]


@dataclass
class Outcome:
    """A finished run: what it computed and the settings it computed it with."""

    name: str                        # the recipe's name (titles)
    config: DictConfig               # the config the run was started with (config/resolved.yaml)
    evaluation: Evaluation           # the selected model's evaluation
    metrics: dict[str, float]        # what is logged: the evaluation's metrics and the selection's
    history: list[dict]              # one row per epoch
    out_dir: Path
    step: int                        # the step final metrics are logged at (the last epoch)
    scorer: Scorer                   # the selected model with its standardiser (model/checkpoint.pt)
    dim: int
    store_fingerprint: str
    plots: bool = False              # draw roc.png, timelines.png, det.png
    warnings: list[str] = field(default_factory=list)
    run_id: str | None = None


class Sink:
    """Where a run's outcome goes. Subclass and override what the sink needs."""

    run_id: str | None = None        # the sink's own name for the run, when it has one

    def tag(self, key: str, value: str) -> None:
        """A short fact about the run (e.g. where its resume state is)."""

    def log_rows(self, rows: list[Row]) -> None:
        """Epoch rows, as the run trains (sent in batches)."""

    def logged_steps(self, key: str) -> set[int]:
        """The steps this sink already holds for metric ``key`` (a resumed run sends the rest)."""
        return set()

    def publish(self, outcome: Outcome) -> None:
        """The finished run."""

    def close(self, status: str, state: Path | None = None) -> None:
        """The run ended with ``status`` (FINISHED, FAILED, KILLED: then ``state`` is its resume state)."""


class Sinks(Sink):
    """Several sinks as one, in order (the folder first: a tracking sink uploads it)."""

    def __init__(self, sinks: list[Sink] | None = None):
        self.sinks = list(sinks or [])

    @property
    def run_id(self) -> str | None:  # type: ignore[override]
        return next((s.run_id for s in self.sinks if s.run_id), None)

    def tag(self, key, value):
        for s in self.sinks:
            s.tag(key, value)

    def log_rows(self, rows):
        if rows:
            for s in self.sinks:
                s.log_rows(rows)

    def logged_steps(self, key):
        held = [s.logged_steps(key) for s in self.sinks if s.run_id]
        return set.intersection(*held) if held else set()

    def publish(self, outcome):
        outcome.run_id = self.run_id
        for s in self.sinks:
            s.publish(outcome)

    def close(self, status, state=None):
        for s in self.sinks:
            s.close(status, state)
