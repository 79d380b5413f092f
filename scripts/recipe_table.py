"""Recipe x scenario test metric over 3 seeds (mean +- sd), with reference scorers and chance.

usage: python scripts/recipe_table.py [--work DIR] [--seeds 0,1,2] [--jobs 2]
Prints the markdown table for synthetic/README.md. The headline is frame AUC, except in
warehouse_context, where a scorer that only knows the scene context already reaches a high
frame AUC: there it is the AUC over the frames of anomalous test videos only.
"""
from __future__ import annotations

import argparse
import subprocess
import sys
import tempfile
from pathlib import Path

from wsad.report import load_runs
from wsad.store import FeatureStore
from wsad.synthetic import generate_store, load_scenario, reference_metrics

SCENARIOS = ["warehouse", "warehouse_correlated", "warehouse_uncorrelated", "warehouse_context"]
RECIPES = ["topk", "windows", "mil_ranking", "magnitude"]
HEADLINE = {s: "frame_auc" for s in SCENARIOS} | {"warehouse_context": "anomalous_video_auc"}
REFERENCES = {"signature reference (knows the event signatures)": ("signature", 1),
              "the same, averaged over 3 neighbouring segments": ("signature", 3),
              "context only (knows which scenes can hold an anomaly)": ("context", 1)}


def main() -> None:
    ap = argparse.ArgumentParser()
    ap.add_argument("--work", default=None)
    ap.add_argument("--seeds", default="0,1,2")
    ap.add_argument("--jobs", default="2")
    ap.add_argument("--recipes", default=",".join(RECIPES))
    args = ap.parse_args()
    recipes = args.recipes.split(",")
    work = Path(args.work or tempfile.mkdtemp(prefix="wsad-recipes-"))
    uri = f"sqlite:///{work}/mlruns.db"
    cells, refs = {}, {}
    for scen in SCENARIOS:
        root = work / scen
        if not (root / "store.json").exists():
            generate_store(load_scenario(scen), root, progress=False)
        for name, (scorer, smooth) in REFERENCES.items():
            refs[(name, scen)] = reference_metrics(FeatureStore(root), scorer, smooth=smooth).get(HEADLINE[scen])
        subprocess.run([sys.executable, "-c", "from wsad.cli.train import main; main()", "-m",
                        f"data.root={root}", f"recipe={','.join(recipes)}", f"seed={args.seeds}",
                        "trainer.progress=false", "hydra/launcher=joblib",
                        f"hydra.launcher.n_jobs={args.jobs}", f"tracking.uri={uri}",
                        f"tracking.experiment={scen}", f"hydra.sweep.dir={work}/runs_{scen}"],
                       check=True, capture_output=True)  # an experiment per scenario; reruns add runs
        runs = load_runs(uri, scen)
        for recipe in recipes:
            vals = runs[runs["params.recipe_name"] == recipe][f"metrics.{HEADLINE[scen]}"].to_numpy()
            cells[(recipe, scen)] = (vals.mean(), vals.std(ddof=1), len(vals))
    print("| recipe | " + " | ".join(f"{s} ({HEADLINE[s]})" for s in SCENARIOS) + " |")
    print("|---|" + "---|" * len(SCENARIOS))
    for recipe in recipes:
        print(f"| {recipe} | " + " | ".join(
            f"{cells[(recipe, s)][0]:.3f} ± {cells[(recipe, s)][1]:.3f}" for s in SCENARIOS) + " |")
    for name in REFERENCES:
        print(f"| {name} | " + " | ".join("n/a" if refs[(name, s)] is None else f"{refs[(name, s)]:.3f}"
                                          for s in SCENARIOS) + " |")
    print("| chance | " + " | ".join("0.500" for _ in SCENARIOS) + " |")
    n = {c[2] for c in cells.values()}
    print(f"\n(test split, mean ± sd over {sorted(n)} seeds)")


if __name__ == "__main__":
    main()
