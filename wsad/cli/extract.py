"""wsad-extract VIDEOS --out DIR [--backbone NAME] [--weights default|PATH|none] [--crops 1|5|10]
[--fps N] [--batch N] [--shard i/n | --submit local|slurm --shards N] [--labels CSV [--events CSV]]."""
from __future__ import annotations

import argparse
import os
import sys

from ..errors import WsadError, run_cli


def _args(argv: list[str]) -> argparse.Namespace:
    from ..extract.backbones import BACKBONES
    from ..extract.preprocess import CROPS

    ap = argparse.ArgumentParser(prog="wsad-extract", description="Per-segment features (one per 16 frames) "
                                 "from video files with a published 3D ResNet, on the CPU.")
    ap.add_argument("videos", help="a video file, or a folder of them (VIDEOS/<camera>/<file> gives group = camera)")
    ap.add_argument("--out", required=True, help="folder for the features (a rerun skips videos already done)")
    ap.add_argument("--backbone", default="r3d_18", choices=list(BACKBONES))
    ap.add_argument("--weights", default="default",
                    help="default (the published Kinetics-400 file, fetched once), a state-dict PATH, "
                         "or none (random: meaningless features, for dry runs)")
    ap.add_argument("--crops", type=int, default=1, choices=list(CROPS), help="views per segment "
                    "(5: corners and centre; 10: those and their flips)")
    ap.add_argument("--fps", type=float, default=None, help="resample every video to N frames per second")
    ap.add_argument("--batch", type=int, default=8, help="segments per forward pass")
    ap.add_argument("--threads", type=int, default=None, help="torch threads (default: the machine's cores)")
    ap.add_argument("--shard", default=None, help="i/n: this process does every n-th video from the i-th (0-based)")
    ap.add_argument("--submit", choices=["local", "slurm"], default=None,
                    help="run --shards shards as a job array through submitit (slurm: on the cluster)")
    ap.add_argument("--shards", type=int, default=4, help="how many shards --submit runs")
    ap.add_argument("--partition", default=None, help="SLURM partition for --submit slurm")
    ap.add_argument("--timeout-min", type=int, default=240, help="per-shard time limit for --submit")
    ap.add_argument("--labels", default=None, help="CSV video,label,split[,group]: write a ready store in --out")
    ap.add_argument("--events", default=None, help="CSV video,start,end for the store (with --labels)")
    ap.add_argument("--quiet", action="store_true", help="no progress bar")
    args = ap.parse_args(argv)
    if args.batch < 1:
        raise WsadError(f"--batch {args.batch}: give at least 1 segment per forward pass")
    if args.fps is not None and not 0 < args.fps < 10_000:
        raise WsadError(f"--fps {args.fps}: give a positive number of frames per second")
    if args.events and not args.labels:
        raise WsadError("--events goes with --labels (the store it describes)")
    if args.submit and args.shard:
        raise WsadError("--shard is for one process; --submit runs --shards shards itself")
    return args


def run_shard(args: argparse.Namespace, shard: tuple[int, int]):
    """One shard in this process (also what each submitted job runs)."""
    import torch

    from ..extract.backbones import build_backbone
    from ..extract.folder import Settings, extract_folder
    from ..extract.pipeline import steady_memory

    steady_memory()
    torch.set_num_threads(args.threads or os.cpu_count() or 1)
    model = build_backbone(args.backbone, args.weights)
    settings = Settings(args.backbone, args.weights, args.crops, args.fps)
    return extract_folder(args.videos, args.out, model, settings, args.batch, shard, args.labels,
                          args.events, progress=not args.quiet)


def _submit(args: argparse.Namespace) -> list:
    import submitit

    if args.shards < 1:
        raise WsadError(f"--shards {args.shards}: give at least 1")
    ex = submitit.AutoExecutor(folder=os.path.join(args.out, ".extract", "jobs"), cluster=args.submit)
    params = {"timeout_min": args.timeout_min, "cpus_per_task": args.threads or 2}
    if args.submit == "slurm" and args.partition:
        params["slurm_partition"] = args.partition
    ex.update_parameters(**params)
    args.quiet = True
    jobs = ex.map_array(run_shard, [args] * args.shards, [(i, args.shards) for i in range(args.shards)])
    print(f"wsad-extract: {len(jobs)} shard job(s) submitted ({args.submit}); waiting")
    return [j.result() for j in jobs]


def _main(argv: list[str]) -> int:
    from ..extract.folder import parse_shard

    args = _args(argv)
    outcomes = _submit(args) if args.submit else [run_shard(args, parse_shard(args.shard))]
    done = sum(len(o.done) for o in outcomes)
    skipped = sum(len(o.skipped) for o in outcomes)
    failed = {k: v for o in outcomes for k, v in o.failed.items()}
    print(f"wsad-extract: {done} video(s) extracted, {skipped} already done, {len(failed)} failed, in {args.out}")
    for reason in failed.values():
        print(f"  failed: {reason}", file=sys.stderr)
    store = next((o.store for o in outcomes if o.store), None)
    if store:
        print(f"wsad-extract: store ready in {store} (check it with wsad-check {store})")
    elif args.labels:
        print(f"wsad-extract: {max(o.waiting for o in outcomes)} labelled video(s) still to extract; "
              "the store is written when all are")
    else:
        print(f"wsad-extract: fill label and split in {os.path.join(args.out, 'labels_template.csv')}, then "
              f"wsad-index {args.out} --labels labels.csv --out STORE")
    return 2 if failed else 0


def main() -> None:
    run_cli(lambda: _main(sys.argv[1:]), "wsad-extract")
