"""The coverage table of the docs (docs/results/coverage.md): how often each candidate 95%
frame-AUC interval holds the true AUC over a family of simulated test sets unlike the project's
scenarios (wsad.evaluate.designs: 6 to 40 cameras, equal and unequal videos per camera,
camera-specific offsets, effect sizes and anomaly rates, heavy-tailed AR(1) noise, events placed
at frame level), the camera as the unit.

    python scripts/coverage_table.py [REPLICATES] [--out docs/results/coverage.md]

With --out it also writes wsad/evaluate/coverage_measured.json: the default interval's coverage per
number of cameras, which a run with few test cameras quotes in its warning.
"""
from __future__ import annotations

import sys
from pathlib import Path

import pandas as pd
from tqdm.auto import tqdm

from wsad.evaluate.designs import FAMILY, family_coverage


def table(replicates: int) -> pd.DataFrame:
    rows = []
    for d in tqdm(FAMILY, desc="designs"):
        rows += family_coverage(d, replicates, seed=0)
    return pd.DataFrame(rows)


def markdown(df: pd.DataFrame) -> str:
    order = [d.name for d in FAMILY]
    cols = list(dict.fromkeys(df.interval))
    reps = int(df.replicates.iloc[0])
    lines = [f"<!-- output of: python scripts/coverage_table.py {reps} -->",
             f"Share of {reps} simulated test sets per design whose 95% interval holds the true frame AUC "
             "(the camera as the unit; binomial se about "
             f"{(0.95 * 0.05 / reps) ** 0.5:.3f} near 0.95). Mean width in brackets.", "",
             "| design | true AUC | " + " | ".join(cols) + " |", "|---|---|" + "---|" * len(cols)]
    for name in order:
        sub = df[df.design == name].set_index("interval")
        cells = [f"{sub.loc[c, 'coverage']:.3f} ({sub.loc[c, 'width']:.3f})" for c in cols]
        lines.append(f"| {name} | {sub.true_auc.iloc[0]:.3f} | " + " | ".join(cells) + " |")
    below = df.groupby("interval").misses_below.mean()
    lines += ["", "Share of misses where the interval lies below the truth (1: every miss one-sided low): "
              + ", ".join(f"{c} {below[c]:.2f}" for c in cols) + "."]
    return "\n".join(lines) + "\n"


def main(argv: list[str]) -> None:
    reps = int(argv[0]) if argv and not argv[0].startswith("--") else 1000
    out = Path(argv[argv.index("--out") + 1]) if "--out" in argv else None
    df = table(reps)
    text = markdown(df)
    print(text)
    if out is not None:
        out.write_text(text)
        import json

        from wsad.evaluate.designs import FAMILY
        from wsad.evaluate.evaluation import MEASURED

        default = df[df.interval == "jackknife"].set_index("design").coverage
        measured = {}
        for d in FAMILY:
            kind = "unequal" if d.unequal else "equal"
            measured.setdefault(str(d.cameras), {})[kind] = round(float(default[d.name]), 3)
        MEASURED.write_text(json.dumps({"replicates": reps, "coverage": measured}, indent=1) + "\n")


if __name__ == "__main__":
    main(sys.argv[1:])
