"""wsad-score checkpoint=PATH data.root=DIR out=FILE.parquet [split=test|train|all]."""
from __future__ import annotations

import sys
import warnings
from pathlib import Path

from ..errors import WsadError, run_cli

USAGE = ("usage: wsad-score checkpoint=PATH data.root=DIR out=FILE.parquet [split=test]\n"
         "  scores a store with a trained model; columns video, frame, score, label, group")


def _main(argv: list[str]) -> int:
    if not argv or argv[0] in ("-h", "--help"):
        print(USAGE)
        return 0
    from ..settings import parse_overrides

    opts = {}
    for a in argv:
        if "=" not in a:
            raise WsadError(f"argument {a!r} is not key=value\n{USAGE}")
    for o in parse_overrides(argv):   # Hydra's grammar, as wsad-train reads it (quote a path holding ',')
        k = o.key_or_group
        if k not in ("checkpoint", "data.root", "out", "split", "data.crops"):
            raise WsadError(f"unknown option {k!r}; use checkpoint=, data.root=, out=, split=")
        opts[k] = str(o.value())
    for k in ("checkpoint", "data.root", "out"):
        if k not in opts:
            raise WsadError(f"{k}= is required\n{USAGE}")
    out = Path(opts["out"])
    if out.suffix != ".parquet":
        raise WsadError(f"out={out} should end in .parquet")
    if out.exists():
        raise WsadError(f"out={out} exists; choose a new file (wsad-score never overwrites)")

    from ..checkpoint import scorer_from_checkpoint
    from ..evaluate import compute_metrics, frame_table, video_scores
    from ..files import atomic_path
    from ..store import FeatureStore, check_store

    errors = [p for p in check_store(opts["data.root"]) if p.severity == "error"]
    if errors:
        raise WsadError(f"the store has {len(errors)} problem(s), first: {errors[0]}; "
                        f"run wsad-check {opts['data.root']}")
    scorer, cfg, dim = scorer_from_checkpoint(opts["checkpoint"])
    store = FeatureStore(opts["data.root"], crops=opts.get("data.crops", cfg.data.crops))
    if store.dim != dim:
        raise WsadError(f"the model was trained on {dim}-d features; the store has {store.dim}-d")
    split = opts.get("split", "test")
    videos = store.videos(None if split == "all" else split)
    if not videos:
        raise WsadError(f"the store has no {split} videos")
    scored = video_scores(store, scorer(store, videos))
    table = frame_table(scored)
    with atomic_path(out) as tmp:
        table.to_parquet(tmp, index=False)
    print(f"wsad-score: {len(videos)} videos, {len(table)} frames -> {out}")
    try:
        with warnings.catch_warnings():
            warnings.simplefilter("ignore")
            m = compute_metrics(scored)
        print("  " + ", ".join(f"{k} {v:.4f}" for k, v in m.items()))
    except WsadError:
        pass  # a split without both labels: scores only
    return 0


def main() -> None:
    run_cli(lambda: _main(sys.argv[1:]), "wsad-score")
