"""The coverage table of the docs (docs/results/coverage.md): how often 95% frame-AUC intervals hold the true AUC on
simulated test sets (wsad.evaluate.coverage), per interval kind and resampling unit.

    python scripts/coverage_table.py [REPLICATES]
"""
from __future__ import annotations

import sys

from wsad.evaluate.coverage import coverage_table


def main(replicates: int) -> None:
    t = coverage_table(replicates)
    print(f"| test set | unit | interval | coverage (± se) | mean width | true AUC |  ({replicates} replicates)")
    print("|---|---|---|---|---|---|")
    for _, r in t.iterrows():
        print(f"| {r['test set']} | {r.unit} | {r.interval} | {r.coverage:.3f} ± {r.coverage_se:.3f} | "
              f"{r.width:.3f} | {r.true_auc:.3f} |")


if __name__ == "__main__":
    main(int(sys.argv[1]) if len(sys.argv) > 1 else 1000)
