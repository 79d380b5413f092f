"""Publishing a finished run: the run folder (:mod:`.folder`), MLflow (:mod:`.tracked`), or
nothing; and reading it back as a :class:`Run` (:mod:`.run`). Sinks receive values; nothing
here computes a metric."""
from .base import Outcome, Sink, Sinks
from .budgets import budget_table
from .folder import HELDOUT_SCORES, SUMMARY, TEST_SCORES, FolderSink, summary, write_evaluation, write_summary
from .run import Run, load_run

__all__ = ["Run", "load_run", "budget_table", "Outcome", "Sink", "Sinks", "HELDOUT_SCORES", "SUMMARY",
           "TEST_SCORES", "FolderSink", "summary", "write_evaluation", "write_summary"]
