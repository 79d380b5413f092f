"""wsad-report --tracking-uri URI --experiment NAME [--by P,Q] [--baseline k=v] --out DIR."""
from __future__ import annotations

import argparse
import sys

from ..errors import run_cli
from ..evaluate.catalogue import reported


def _main(argv: list[str]) -> int:
    from ..report import build_report, load_runs, markdown_table, write_report
    from ..tracking import resolve_uri

    ap = argparse.ArgumentParser(prog="wsad-report", description="Aggregate an experiment's runs "
                                 "over seeds: tables with intervals and paired tests, and plots.")
    ap.add_argument("--tracking-uri", default="sqlite:///mlruns.db")
    ap.add_argument("--experiment", default="wsad")
    ap.add_argument("--by", default=None, help="comma-separated params defining a variant "
                    "(default: every param that varies besides the seed)")
    ap.add_argument("--filter", default="", help="an MLflow filter string, e.g. \"params.recipe_name = 'topk'\"")
    ap.add_argument("--baseline", default=None, help="the variant to pair against, e.g. ablation.toggle=none")
    ap.add_argument("--metric", default="frame_auc", help="the primary metric: its comparisons are Holm-adjusted "
                    "and may be marked significant; the others are secondary (and the plots' headline)")
    ap.add_argument("--alpha", type=float, default=0.05)
    ap.add_argument("--out", required=True, help="folder for report.md/.csv/.tex and plots")
    ap.add_argument("--no-plots", action="store_true")
    ap.add_argument("--plan", type=float, default=None, metavar="D",
                    help="seeds needed to detect a difference D in --metric (power 0.8, alpha 0.05), "
                         "from the paired spread these runs show")
    args = ap.parse_args(argv)
    uri = resolve_uri(args.tracking_uri)
    runs = load_runs(uri, args.experiment, args.filter)
    by = [b.strip() for b in args.by.split(",")] if args.by else None
    rep = build_report(runs, by=by, baseline=args.baseline, metrics=reported(), alpha=args.alpha,
                       primary=args.metric)
    if args.metric == "frame_auc":
        _two_level(rep, uri)
    paths = write_report(rep, args.out, uri, headline=args.metric, plots=not args.no_plots, plan=args.plan)
    print(markdown_table(rep, args.metric))
    if args.plan is not None:  # the plan write_report made
        import pandas as pd

        from ..report.planning import plan_markdown

        print()
        print(plan_markdown(pd.read_csv(paths["plan"]), args.metric))
    print()
    for k, p in paths.items():
        print(f"  {k:<16} {p}")
    return 0


def _two_level(rep, uri: str) -> None:
    """Give the frame-AUC rows the two-level interval (test cameras and seeds): each run's
    exported test scores are downloaded once; runs without them leave the rows as they are."""
    import tempfile
    from pathlib import Path

    from ..report.two_level import add_two_level
    from ..tracking.client import download

    with tempfile.TemporaryDirectory(prefix="wsad-report-") as name:
        tmp, folders = Path(name), []
        for run_id in rep.runs.run_id:
            # into <run>/scores/: the layout of a run folder (MLflow puts the file in the folder given)
            got = download(uri, run_id, "scores/test_scores.parquet", tmp / run_id / "scores")
            if got is None or not got.is_file():   # a run that exported no scores
                return
            folders.append(str(tmp / run_id))
        rep.runs["folder"] = folders
        add_two_level(rep)
        rep.runs.drop(columns="folder", inplace=True)


def main() -> None:
    run_cli(lambda: _main(sys.argv[1:]), "wsad-report")
