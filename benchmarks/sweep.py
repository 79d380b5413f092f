"""What a sweep costs beyond its epochs.

- ``sweep.efficiency``: (sum over runs of epoch compute / workers) / the sweep's wall time, for
  the demo's sweep (topk and windows x 3 seeds, 2 workers of wsad's own launcher
  ``hydra/launcher=workers``, SQLite tracking, the default scenario). Epoch compute is what each
  run logs as ``time/train_s + time/eval_s`` per epoch. Goal >= 0.75.
- ``sweep.efficiency_joblib``: the same sweep on Hydra's joblib launcher (2 jobs), measured in
  the same run: what the launcher of our own changes.
- ``sweep.import_floor_s``: one process importing what every worker needs before its first
  epoch (torch, the torch._dynamo that torch.optim loads, MLflow and its SQL store, pandas,
  Hydra), and
  ``sweep.efficiency_bound`` = ideal / (ideal + that floor): no sweep of these runs with
  process workers can beat it on this machine, whatever wsad does.
- ``sweep.efficiency_long``: the same sweep with 5x the epochs (a study's usual run length).
- ``run.overhead_s.cold``: one ``wsad-train -m`` process of one run, wall time minus its epoch
  compute (imports, store check, tracking, final evaluation, artifacts); the median of
  ``COLD_REPEATS`` processes. Goal <= 6 s.
- ``run.overhead_s.warm``: per run inside a worker that already ran one: in a 3-run sweep in
  one process, the time from one run's end to the next one's end minus the next one's epoch
  compute, averaged. Goal <= 1.5 s.

    python benchmarks/sweep.py [tiny|quick|full]
"""
from __future__ import annotations

import statistics
import subprocess
import sys
import tempfile
import time
from pathlib import Path

from _common import WORK, emit, size_arg

STORES = {"tiny": ["videos_per_camera.train=4", "videos_per_camera.test=4", "length.mean=40"],
          "quick": [], "full": []}
EPOCHS = {"tiny": 3, "quick": 30, "full": 30}     # 30: the recipes' own default
LONG = {"tiny": 0, "quick": 150, "full": 150}     # 0: not measured (the demo's figure stands in)
COLD_REPEATS = {"tiny": 1, "quick": 3, "full": 5}
FLOOR_REPEATS = {"tiny": 1, "quick": 3, "full": 3}   # the floor is the best of these
FLOOR = ("import time; t = time.perf_counter(); import torch, torch._dynamo, mlflow, pandas, hydra, "
         "omegaconf, mlflow.store.tracking.sqlalchemy_store; print(time.perf_counter() - t)")


def demo_store(size: str) -> Path:
    from wsad.synthetic import generate_store, load_scenario

    path = WORK / f"sweep-{size}"
    if not (path / "store.json").is_file():
        generate_store(load_scenario("warehouse", STORES[size]), path, progress=False)
    return path


def sweep(store: Path, work: Path, name: str, args: list[str]) -> tuple[float, list]:
    """Wall seconds of one ``wsad-train -m`` and its runs as (end s, epoch compute s), by end."""
    import mlflow

    db = work / "mlruns.db"
    cmd = [str(Path(sys.executable).with_name("wsad-train")), "-m", f"data.root={store}",
           "trainer.progress=false", f"tracking.uri=sqlite:///{db}", f"tracking.experiment={name}",
           f"hydra.sweep.dir={work}/{name}", *args]
    t = time.perf_counter()
    subprocess.run(cmd, check=True, capture_output=True, cwd=work)
    wall = time.perf_counter() - t
    client = mlflow.MlflowClient(f"sqlite:///{db}")
    runs = []
    for r in client.search_runs([client.get_experiment_by_name(name).experiment_id]):
        if r.data.tags.get("wsad.sweep") == "parent":
            continue   # the sweep's parent run computes nothing
        compute = sum(m.value for key in ("time/train_s", "time/eval_s")
                      for m in client.get_metric_history(r.info.run_id, key))
        runs.append((r.info.end_time / 1000.0, compute))
    return wall, sorted(runs)


def efficiency(store: Path, work: Path, name: str, epochs: int, launcher: str = "workers") -> dict:
    demo = ["recipe=topk,windows", "seed=0,1,2", f"hydra/launcher={launcher}", "hydra.launcher.n_jobs=2",
            f"trainer.epochs={epochs}"]
    wall, runs = sweep(store, work, name, demo)
    compute = sum(c for _, c in runs)
    return {"efficiency": (compute / 2) / wall, "wall_s": wall, "compute_s": compute, "runs": len(runs)}


def import_floor(repeats: int) -> float:
    """Seconds a fresh process spends importing what a worker needs (the best of ``repeats``)."""
    return min(float(subprocess.run([sys.executable, "-c", FLOOR], check=True, capture_output=True,
                                    text=True).stdout) for _ in range(repeats))


def run(size: str) -> dict:
    store = demo_store(size)
    with tempfile.TemporaryDirectory() as tmp:
        work = Path(tmp)
        from wsad.tracking.client import migrate

        migrate(work / "mlruns.db")   # an existing store for every sweep (a fresh one is made once)
        demo = efficiency(store, work, "demo", EPOCHS[size])
        joblib = efficiency(store, work, "demo_joblib", EPOCHS[size], "joblib")
        long = efficiency(store, work, "long", LONG[size]) if LONG[size] else demo
        cold = []
        for i in range(COLD_REPEATS[size]):
            wall, runs = sweep(store, work, f"one{i}", ["recipe=topk", "seed=0", "hydra/launcher=basic",
                                                         f"trainer.epochs={EPOCHS[size]}"])
            cold.append(wall - runs[0][1])
        _, three = sweep(store, work, "three", ["recipe=topk", "seed=0,1,2", "hydra/launcher=basic",
                                                 f"trainer.epochs={EPOCHS[size]}"])
    warm = [(end - before) - compute for (before, _), (end, compute) in zip(three, three[1:])]
    floor = import_floor(FLOOR_REPEATS[size])
    ideal = demo["compute_s"] / 2
    return {"sweep": {**demo, "workers": 2, "epochs": EPOCHS[size],
                      "import_floor_s": floor, "efficiency_bound": ideal / (ideal + floor),
                      "efficiency_long": long["efficiency"], "launcher": "workers",
                      "efficiency_joblib": joblib["efficiency"], "joblib": joblib,
                      "long": {**long, "epochs": LONG[size] or EPOCHS[size]}},
            "run": {"overhead_s": {"cold": statistics.median(cold), "warm": statistics.mean(warm)},
                    "cold_each_s": cold, "warm_each_s": warm}}


if __name__ == "__main__":
    emit(run(size_arg()))
