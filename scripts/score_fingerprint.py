"""A hash of the test scores of each run spec on the default scenario (seed 0), to show a
refactor keeps the numbers: run it before and after, the hashes must be equal.

    python scripts/score_fingerprint.py WORK topk windows mil_ranking \\
        "topk:head=gated_attention,pooling=attention,trainer.epochs=10"

A spec is a recipe, optionally followed by ``:`` and comma-separated overrides. WORK holds the
generated store and one run folder per spec.
"""
from __future__ import annotations

import hashlib
import json
import sys
from pathlib import Path

import pandas as pd

from wsad.config import compose_config
from wsad.synthetic import generate_store, load_scenario
from wsad.train import train


def fingerprint(work: Path, spec: str) -> dict:
    recipe, _, extra = spec.partition(":")
    name = spec.replace(":", "_").replace(",", "_").replace("=", "-")
    train(compose_config([f"data.root={work / 'store'}", f"recipe={recipe}", "seed=0", "trainer.progress=false",
                          "tracking.enabled=false", "trainer.bootstrap=0", f"trainer.out_dir={work / name}",
                          *[e for e in extra.split(",") if e]]))
    scores = pd.read_parquet(work / name / "scores" / "test_scores.parquet")
    text = scores.to_csv(index=False, float_format="%.17g").encode()
    return {"scores_sha256": hashlib.sha256(text).hexdigest()[:16],
            "mean_score": float(scores.score.astype("float64").mean())}


def main(argv: list[str]) -> None:
    work = Path(argv[0])
    work.mkdir(parents=True, exist_ok=True)
    if not (work / "store").exists():
        generate_store(load_scenario("warehouse"), work / "store", progress=False)
    print(json.dumps({spec: fingerprint(work, spec) for spec in argv[1:] or ["topk", "windows", "mil_ranking"]},
                     indent=1))


if __name__ == "__main__":
    main(sys.argv[1:])
