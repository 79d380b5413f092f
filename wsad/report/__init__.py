"""Runs -> tables with intervals and paired tests (:mod:`.tables`), read from
MLflow and grouped into variants (:mod:`.runs`), and the figures (:mod:`.plots`)."""
from ..publish.budgets import budget_table
from .runs import label_keys, load_runs, varying_params
from .tables import (
    Report,
    build_report,
    frame_markdown,
    latex_table,
    markdown_table,
    paired_tests,
    t_interval,
    write_report,
)

__all__ = ["budget_table", "label_keys", "load_runs", "varying_params", "Report", "build_report", "frame_markdown",
           "latex_table", "markdown_table", "paired_tests", "t_interval", "write_report"]
