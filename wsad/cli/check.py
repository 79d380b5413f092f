"""wsad-check DIR [--strict]: validate a store, list every problem."""
from __future__ import annotations

import argparse
import sys

from ..errors import run_cli


def _main(argv: list[str]) -> int:
    from ..store import check_store, summarize

    ap = argparse.ArgumentParser(prog="wsad-check", description="Validate a feature store and "
                                 "list every problem (exit 0 clean, 2 problems).")
    ap.add_argument("root", help="store folder (holds store.json, manifest.csv, features/)")
    ap.add_argument("--strict", action="store_true",
                    help="treat a group present in both splits (camera leakage) as an error")
    ap.add_argument("--no-scan", action="store_true", help="skip reading values for NaN/Inf")
    args = ap.parse_args(argv)
    problems = check_store(args.root, strict=args.strict, scan_values=not args.no_scan)
    errors = [p for p in problems if p.severity == "error"]
    for p in problems:
        print(p, file=sys.stderr if p.severity == "error" else sys.stdout)
    if errors:
        n_vid = len({p.video for p in errors if p.video != "-"})
        print(f"wsad-check: {len(errors)} problem(s) in {args.root} ({n_vid} video(s)); "
              "fix them and run wsad-check again", file=sys.stderr)
        return 2
    print(summarize(args.root))
    print(f"wsad-check: {args.root} is clean"
          + (f" ({len(problems)} warning(s))" if problems else ""))
    return 0


def main() -> None:
    run_cli(lambda: _main(sys.argv[1:]), "wsad-check")
