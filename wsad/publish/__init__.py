"""Publishing a finished run: the run folder (:mod:`.folder`), MLflow (:mod:`.tracked`), or
nothing. Sinks receive values; nothing here computes a metric."""
from .base import Outcome, Sink, Sinks
from .folder import HELDOUT_SCORES, SUMMARY, TEST_SCORES, FolderSink, summary, write_evaluation, write_summary

__all__ = ["Outcome", "Sink", "Sinks", "HELDOUT_SCORES", "SUMMARY", "TEST_SCORES", "FolderSink", "summary",
           "write_evaluation", "write_summary"]
