"""Where the fold-to-fold spread comes from: per fold of an open MIL collection (fold assignment
1000, 5 folds), several seeds of each configuration on the same test bags. The seed sd (root
of the mean over folds of the variance over seeds) is the spread the training causes; the fold
sd (sd over folds of one run per fold, averaged over seeds) adds the test bags' own.

    python scripts/seed_spread.py [--collections elephant,ucsb_breast_cancer] [--seeds 6]
        [--configs "one model,..."] [--csv rows.csv] [--out table.md] [--work DIR]
"""
from __future__ import annotations

import argparse
import tempfile
import warnings
from pathlib import Path

import numpy as np
import pandas as pd
from open_collections import csv_path, wsad_fold
from tqdm.auto import tqdm

#: The configurations compared: one model; five members selected on one shared held-out share with
#: the best-cut threshold (the mode before it held out folds); five members each holding out its own
#: fold, best-cut threshold; the defaults (on a small collection: the mode, with folds and the
#: class-medians threshold).
BEST_CUT = "evaluate.video_threshold_rule=balanced_accuracy"
CONFIGS = {"one model": ["trainer.members=1"],
           "5 members, shared hold-out": ["trainer.members=5", "trainer.members_holdout=shared", BEST_CUT],
           "5 members, folds": ["trainer.members=5", "trainer.members_holdout=folds", BEST_CUT],
           "defaults (the mode)": []}


def runs(name: str, seeds: int, work: Path, configs: list[str]) -> pd.DataFrame:
    from sklearn.model_selection import StratifiedKFold

    from wsad.store.mil_csv import read_bags

    feats, labels = read_bags(csv_path(name))
    names = sorted(feats)
    y = np.array([labels[n] for n in names])
    rows = []
    folds = StratifiedKFold(5, shuffle=True, random_state=1000).split(names, y)
    jobs = [(k, te, c, s) for k, (_, te) in enumerate(folds) for c in configs for s in range(seeds)]
    for k, te, config, seed in tqdm(jobs, desc=name):
        with warnings.catch_warnings():
            warnings.simplefilter("ignore")
            auc, bacc, _ = wsad_fold(feats, labels, [names[i] for i in te], work / f"{name}_{k}_{len(rows)}",
                                     [*CONFIGS[config], f"seed={seed}", "trainer.threads=1"])
        rows.append({"collection": name, "fold": k, "config": config, "seed": seed, "auc": auc, "bacc": bacc})
    return pd.DataFrame(rows)


def table(df: pd.DataFrame) -> str:
    lines = ["| collection | configuration | bag AUC | seed sd | fold sd | bal. acc. | seed sd | fold sd |",
             "|---" * 8 + "|"]
    for (name, config), g in df.groupby(["collection", "config"], sort=False):
        cells = []
        for m in ("auc", "bacc"):
            seed_sd = np.sqrt(g.groupby("fold")[m].var(ddof=1).mean())
            fold_sd = g.groupby("seed")[m].std(ddof=1).mean()
            cells += [f"{g[m].mean():.3f}", f"{seed_sd:.3f}", f"{fold_sd:.3f}"]
        lines.append(f"| {name} | {config} | " + " | ".join(cells) + " |")
    return "\n".join(lines) + "\n"


def main() -> None:
    ap = argparse.ArgumentParser()
    ap.add_argument("--collections", default="elephant,ucsb_breast_cancer")
    ap.add_argument("--seeds", type=int, default=6)
    ap.add_argument("--configs", default=",".join(CONFIGS), help="a subset of: " + ", ".join(CONFIGS))
    ap.add_argument("--csv", default=None)
    ap.add_argument("--out", default=None)
    ap.add_argument("--work", default=None)
    args = ap.parse_args()
    work = Path(args.work or tempfile.mkdtemp(prefix="wsad-seeds-"))
    configs = args.configs.split(",")
    if unknown := set(configs) - set(CONFIGS):
        ap.error(f"unknown configuration(s) {sorted(unknown)}; known: {', '.join(CONFIGS)}")
    df = pd.concat([runs(c, args.seeds, work, configs) for c in args.collections.split(",")], ignore_index=True)
    if args.csv:
        df.to_csv(args.csv, index=False)
    text = table(df)
    print(text)
    if args.out:
        Path(args.out).write_text(text)


if __name__ == "__main__":
    main()
