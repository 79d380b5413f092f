"""The budget table of the docs (docs/results/budget.md): how often a threshold chosen for 1 false
alarm per camera-hour on H hours of held-out normal footage raises more than that on new footage,
with and without evaluate.budget_confidence (wsad.evaluate.designs.budget_exceedance: 8 cameras,
heavy-tailed AR(1) normal streams with camera offsets; new footage 40 h of the same cameras, or of
new cameras).

    python scripts/budget_table.py [REPLICATES] [--out docs/results/budget.md]
"""
from __future__ import annotations

import sys
from pathlib import Path

from tqdm.auto import tqdm

from wsad.evaluate.alarms import hours_needed
from wsad.evaluate.designs import budget_exceedance

HOURS = (0.25, 2.0, 4.0, 8.0)


def main(argv: list[str]) -> None:
    reps = int(argv[0]) if argv and not argv[0].startswith("--") else 400
    out = Path(argv[argv.index("--out") + 1]) if "--out" in argv else None
    rows = []
    cells = [(h, c, n) for h in HOURS for c in (None, 0.95) for n in (False, True)]
    for h, c, n in tqdm(cells, desc="budget cells"):
        rows.append(budget_exceedance(h, confidence=c, new_cameras=n, replicates=reps, seed=0))
    lines = [f"<!-- output of: python scripts/budget_table.py {reps} -->",
             f"Share of {reps} replicates in which the realised false-alarm rate on 40 h of new footage exceeds "
             f"a budget of 1 per camera-hour (median realised rate in brackets). At 95% confidence the budget "
             f"needs at least {hours_needed(1.0):.2f} h of held-out normal footage; with less, no alarm is allowed "
             "there and the run says it cannot certify the budget.", "",
             "| held-out normal footage | threshold rule | same cameras | new cameras |", "|---|---|---|---|"]
    for h in HOURS:
        for c in (None, 0.95):
            same, new = (next(r for r in rows if r["hours"] == h and r["confidence"] == c and r["new_cameras"] == n)
                         for n in (False, True))
            rule = "rate within the budget" if c is None else "95% upper bound within the budget"
            lines.append(f"| {h:g} h | {rule} | {same['exceed']:.3f} ({same['median_rate']:.2f}) | "
                         f"{new['exceed']:.3f} ({new['median_rate']:.2f}) |")
    text = "\n".join(lines) + "\n"
    print(text)
    if out is not None:
        out.write_text(text)


if __name__ == "__main__":
    main(sys.argv[1:])
