"""A study in one Python process (a notebook kernel): its runs on worker processes that live as
long as the process, so a second study pays no start-up.

- ``study.efficiency_warm``: the demo's six runs (topk and windows x 3 seeds, the default
  scenario, the recipes' epochs, SQLite tracking) as a second study on 2 already-warm workers:
  (sum over runs of epoch compute / 2) / the study's wall time. Epoch compute is what each run
  records as ``time/train_s + time/eval_s`` per epoch. Goal >= 0.8.
- ``study.first_wall_s``: the first study's wall time (two runs, which also start the workers).
- ``study.overhead_s_per_run``: (wall x workers - compute) / runs of the warm study.

    python benchmarks/study.py [tiny|quick|full]
"""
from __future__ import annotations

import tempfile
import time
from pathlib import Path

import pandas as pd
from _common import emit, size_arg
from sweep import EPOCHS, demo_store


def compute_s(study) -> float:
    """Epoch compute of every finished run of ``study``, from its history."""
    total = 0.0
    for folder in study.runs().folder:
        h = pd.read_csv(Path(folder) / "scores" / "history.csv")
        total += float(h["time/train_s"].sum() + h["time/eval_s"].sum())
    return total


def main() -> None:
    from wsad import Study

    size = size_arg()
    store = demo_store(size)
    work = Path(tempfile.mkdtemp(prefix="wsad-bench-study-"))
    base = {"trainer.epochs": EPOCHS[size], "tracking.uri": f"sqlite:///{work}/mlruns.db"}
    t = time.perf_counter()   # the first study: starts the workers (imports) and warms them
    Study(store, base=base, variants={"recipe": ["topk"]}, seeds=[10, 11], folder=work / "first").run(jobs=2)
    first = time.perf_counter() - t
    study = Study(store, base=base, variants={"recipe": ["topk", "windows"]}, seeds=3, folder=work / "demo")
    study.specs   # composing the runs' configs is part of planning, before the cell that runs them
    t = time.perf_counter()
    status = study.run(jobs=2)
    wall = time.perf_counter() - t
    compute = compute_s(study)
    emit({"study": {"efficiency_warm": compute / 2 / wall, "wall_s": wall, "compute_s": compute,
                    "runs": int((status.status == "done").sum()), "first_wall_s": first,
                    "overhead_s_per_run": (wall * 2 - compute) / len(status)}})


if __name__ == "__main__":
    main()
