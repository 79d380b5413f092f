"""Selection noise and bias of the model-selection options (docs/guide/small-collections.md).

usage: python scripts/selection_table.py [--work DIR] [--seeds 0,1,2]
For each scenario size and option: the selected model's test frame AUC, mean and sd over
seeds (the sd is the selection noise), and the mean selected epoch. Prints a markdown table.
"""
from __future__ import annotations

import argparse
import tempfile
from pathlib import Path

import numpy as np

from wsad.config import compose_config
from wsad.synthetic import generate_store, load_scenario
from wsad.train import train

SIZES = {"small (4 train videos per camera)": ["videos_per_camera.train=4"],
         "default (the demo's)": []}
OPTIONS = {"weak_val (default)": [], "select=last": ["trainer.select=last"],
           "select_smooth=5": ["trainer.select_smooth=5"], "weak_val_folds=5": ["trainer.weak_val_folds=5"]}


def main() -> None:
    ap = argparse.ArgumentParser()
    ap.add_argument("--work", default=None)
    ap.add_argument("--seeds", default="0,1,2")
    args = ap.parse_args()
    work = Path(args.work or tempfile.mkdtemp(prefix="wsad-selection-"))
    seeds = [int(s) for s in args.seeds.split(",")]
    print("| scenario | option | frame AUC mean | sd over seeds | selected epoch |")
    print("|---|---|---|---|---|")
    for size, scen in SIZES.items():
        root = work / f"store_{len(scen)}"
        if not (root / "store.json").exists():
            generate_store(load_scenario("warehouse", scen), root, progress=False)
        for option, extra in OPTIONS.items():
            aucs, epochs = [], []
            for seed in seeds:
                res = train(compose_config([f"data.root={root}", f"seed={seed}", "trainer.progress=false",
                                            "tracking.enabled=false", "trainer.bootstrap=0",
                                            f"trainer.out_dir={work}/run", *extra]))
                aucs.append(res.metrics["frame_auc"])
                epochs.append(res.metrics["selected_epoch"])
            print(f"| {size} | {option} | {np.mean(aucs):.3f} | {np.std(aucs, ddof=1):.3f} | "
                  f"{np.mean(epochs):.1f} |", flush=True)


if __name__ == "__main__":
    main()
