"""wsad-index FEATURES_DIR --labels CSV [--events CSV] --out DIR [--copy]."""
from __future__ import annotations

import argparse
import sys

from ..errors import run_cli
from ..store.format import SEGMENT_FRAMES


def _main(argv: list[str]) -> int:
    from ..store import build_store, check_store, summarize

    ap = argparse.ArgumentParser(prog="wsad-index", description="Build a feature store from "
                                 "FEATURES_DIR/<video>.npy arrays and a labels CSV; your arrays "
                                 "are linked (or copied), never modified.")
    ap.add_argument("features_dir")
    ap.add_argument("--labels", required=True, help="CSV with video,label,split[,group][,frames]")
    ap.add_argument("--events", help="CSV with video,start,end (frame indices, end exclusive)")
    ap.add_argument("--out", required=True, help="new folder for the store")
    ap.add_argument("--copy", action="store_true", help="copy arrays instead of symlinking them")
    ap.add_argument("--segment-frames", type=int, default=SEGMENT_FRAMES,
                    help=f"frames per segment of your arrays (default {SEGMENT_FRAMES})")
    ap.add_argument("--fps", type=float, default=None,
                    help="frames per second of the source footage (needed for anything measured in time)")
    args = ap.parse_args(argv)
    out = build_store(args.features_dir, args.labels, args.out, events_csv=args.events,
                      copy=args.copy, segment_frames=args.segment_frames, fps=args.fps)
    problems = check_store(out)
    for p in problems:
        print(p)
    if any(p.severity == "error" for p in problems):
        print(f"wsad-index: store written to {out} but it has problems (listed above); fix the "
              "inputs and index again into a new folder", file=sys.stderr)
        return 2
    print(summarize(out))
    print(f"wsad-index: store written to {out}")
    return 0


def main() -> None:
    run_cli(lambda: _main(sys.argv[1:]), "wsad-index")
