"""What a sweep costs beyond its epochs.

- ``sweep.efficiency``: (sum over runs of epoch compute / workers) / the sweep's wall time, for
  the demo's sweep (topk and windows x 3 seeds, 2 joblib workers, SQLite tracking, the default
  scenario). Epoch compute is what each run logs as ``time/train_s + time/eval_s`` per epoch.
  Goal >= 0.8.
- ``run.overhead_s.cold``: one ``wsad-train`` process, wall time minus its epoch compute (imports,
  store check, tracking, final evaluation, plots, artifacts). Goal <= 6 s.
- ``run.overhead_s.warm``: the same per run inside a sweep worker that already ran one:
  (wall of a 3-run sweep in one worker - wall of a 1-run sweep - the 2 extra runs' compute) / 2.
  Goal <= 1.5 s.

    python benchmarks/sweep.py [tiny|quick|full]
"""
from __future__ import annotations

import subprocess
import sys
import tempfile
import time
from pathlib import Path

from _common import WORK, emit, size_arg

STORES = {"tiny": ["videos_per_camera.train=4", "videos_per_camera.test=4", "length.mean=40"],
          "quick": [], "full": []}


def demo_store(size: str) -> Path:
    from wsad.synthetic import generate_store, load_scenario

    path = WORK / f"sweep-{size}"
    if not (path / "store.json").is_file():
        generate_store(load_scenario("warehouse", STORES[size]), path, progress=False)
    return path


def sweep(store: Path, work: Path, name: str, args: list[str]) -> tuple[float, float, int]:
    """(wall seconds, summed epoch compute seconds, runs) of one ``wsad-train -m``."""
    import mlflow

    db = work / "mlruns.db"
    cmd = [str(Path(sys.executable).with_name("wsad-train")), "-m", f"data.root={store}",
           "trainer.progress=false", f"tracking.uri=sqlite:///{db}", f"tracking.experiment={name}",
           f"hydra.sweep.dir={work}/{name}", *args]
    t = time.perf_counter()
    subprocess.run(cmd, check=True, capture_output=True, cwd=work)
    wall = time.perf_counter() - t
    client = mlflow.MlflowClient(f"sqlite:///{db}")
    runs = client.search_runs([client.get_experiment_by_name(name).experiment_id])
    compute = 0.0
    for r in runs:
        for key in ("time/train_s", "time/eval_s"):
            compute += sum(m.value for m in client.get_metric_history(r.info.run_id, key))
    return wall, compute, len(runs)


def run(size: str) -> dict:
    store = demo_store(size)
    with tempfile.TemporaryDirectory() as tmp:
        work = Path(tmp)
        demo = ["recipe=topk,windows", "seed=0,1,2", "hydra/launcher=joblib", "hydra.launcher.n_jobs=2"]
        wall, compute, n = sweep(store, work, "demo", demo)
        one = ["recipe=topk", "seed=0", "hydra/launcher=basic"]
        wall1, compute1, _ = sweep(store, work, "one", one)
        three = ["recipe=topk", "seed=0,1,2", "hydra/launcher=basic"]
        wall3, compute3, _ = sweep(store, work, "three", three)
    return {"sweep": {"efficiency": (compute / 2) / wall, "wall_s": wall, "compute_s": compute, "runs": n,
                      "workers": 2},
            "run": {"overhead_s": {"cold": wall1 - compute1, "warm": (wall3 - wall1 - (compute3 - compute1)) / 2},
                    "one_run_wall_s": wall1, "one_run_compute_s": compute1}}


if __name__ == "__main__":
    emit(run(size_arg()))
