"""wsad-evaluate SCORES --store DIR [--heldout FILE] [--out DIR] [key=value ...]: scores made
by any method, evaluated exactly as a run is, into a report folder."""
from __future__ import annotations

import argparse
import sys
from pathlib import Path

from ..errors import WsadError, run_cli
from .console import metric_lines

PROG = "wsad-evaluate"
EPILOG = """settings (key=value, as in wsad-train): budget=1.0 (false alarms per camera-hour),
min_alarm_s=0 merge_gap_s=0 bootstrap=1000 bootstrap_by=video|group interval=clustered|percentile seed=0

example:
  wsad-evaluate published_scores.parquet --store warehouse_store --heldout heldout_scores.parquet \\
      --out published_report budget=2"""


def _main(argv: list[str]) -> int:
    ap = argparse.ArgumentParser(prog=PROG, description="Evaluate scores made by any method exactly as a wsad "
                                 "run is evaluated: the same metrics, intervals, video threshold and operating "
                                 "point. SCORES: parquet or CSV with columns video,segment,score or "
                                 "video,frame,score for the store's test videos.", epilog=EPILOG,
                                 formatter_class=argparse.RawDescriptionHelpFormatter)
    ap.add_argument("scores", help="test-split scores (parquet or CSV)")
    ap.add_argument("--store", required=True, help="the feature store the videos belong to")
    ap.add_argument("--heldout", default=None, help="scores of held-out training videos in the same form: "
                    "their normal videos set the alarm threshold, with anomalous ones the video threshold")
    ap.add_argument("--out", default=None, help="a new folder for the report (summary.json, tables, plots)")
    ap.add_argument("--no-plots", action="store_true")
    ap.add_argument("settings", nargs="*", metavar="key=value")
    args = ap.parse_intermixed_args(argv)
    out = Path(args.out) if args.out else None
    if out is not None and out.exists() and any(out.iterdir()):
        raise WsadError(f"--out {out} is not empty; choose a new folder (wsad-evaluate never overwrites)")
    settings = _settings(args.settings)

    from ..evaluate import evaluate_scores
    from ..publish import write_evaluation, write_summary
    from ..store import check_store, store_fingerprint

    errors = [p for p in check_store(args.store) if p.severity == "error"]
    if errors:
        raise WsadError(f"the store has {len(errors)} problem(s), first: {errors[0]}; run wsad-check {args.store}")
    ev = evaluate_scores(args.store, args.scores, args.heldout, **settings)
    print(f"{PROG}: " + metric_lines(ev.metrics, settings.get("budget", 1.0)))
    if out is not None:
        name = Path(args.scores).stem
        write_evaluation(out, ev, name, plots=not args.no_plots)
        write_summary(out, ev.metrics, ev, name=name, scores=str(Path(args.scores).resolve()),
                      store_fingerprint=store_fingerprint(args.store))
        print(f"  report folder {out} (summary.json)")
    return 0


def _settings(items: list[str]) -> dict:
    """``key=value`` items read with Hydra's override parser (the grammar of wsad-train)."""
    from ..evaluate import EvaluationSettings
    from ..settings import parse_overrides

    known = [f for f in EvaluationSettings.__dataclass_fields__ if f != "heldout_fitted"]
    out = {}
    for text, o in zip(items, parse_overrides(items)):
        if o.key_or_group not in known:
            raise WsadError(f"{text}: unknown setting {o.key_or_group!r}; known: {', '.join(known)}")
        out[o.key_or_group] = o.value()
    return out


def main() -> None:
    run_cli(lambda: _main(sys.argv[1:]), PROG)
