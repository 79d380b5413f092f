"""A whole ``wsad-train`` process beside the plain script a researcher writes instead
(``plain_topk.py``), side by side on one store, 3 epochs: the wall time of each process from
start to exit, the median of ``REPEATS`` alternating runs.

- ``plain.ratio_topk``: ``wsad-train recipe=topk`` / the plain script. Goal <= 0.75.
- ``plain.ratio_cluster``: the same with the k = 2 cluster term (wsad's batched term; the
  plain script runs scikit-learn KMeans(2, n_init=3) per video at every step). Goal <= 0.35.
- ``plain.wsad_timeline``: where a 3-epoch wsad-train spends its time, from its own clock
  (``WSAD_TIMELINE=1`` prints it): imports, config, build, epochs, evaluation, publish, exit.

The store is 600 videos of 1024-d float16 features (486 train, 114 test; the research-scale
scenario with fewer cameras), generated once under the benchmark work folder.

    python benchmarks/plain_vs_wsad.py [tiny|quick|full]
"""
from __future__ import annotations

import json
import os
import statistics
import subprocess
import sys
import tempfile
import time
from pathlib import Path

from _common import emit, size_arg, store

HERE = Path(__file__).resolve().parent
EPOCHS = 3
REPEATS = {"tiny": 1, "quick": 1, "full": 3}
# 600 videos: 6 train cameras per context x 27 videos, 2 test cameras per context x 19 videos
SHAPE = ["cameras.conveyor.test=2", "cameras.loading_bay.test=2", "cameras.walkway.test=2",
         "videos_per_camera.test=19"]


def timed(cmd: list[str], cwd: Path, env: dict | None = None) -> tuple[float, str]:
    t = time.perf_counter()
    out = subprocess.run(cmd, check=True, capture_output=True, text=True, cwd=cwd, env=env)
    return time.perf_counter() - t, out.stdout + out.stderr


def wsad_cmd(root: Path, work: Path, tag: str, cluster: bool) -> list[str]:
    return [str(Path(sys.executable).with_name("wsad-train")), f"data.root={root}", "recipe=topk",
            f"trainer.epochs={EPOCHS}", "trainer.threads=2", f"tracking.uri=sqlite:///{work}/mlruns.db",
            f"trainer.out_dir={work}/{tag}", f"hydra.run.dir={work}/{tag}-hydra",
            *(["objective.cluster_distance=1e-3"] if cluster else [])]


def timeline(text: str) -> dict:
    """The ``WSAD_TIMELINE`` line of a run's output as {stage: seconds}."""
    for line in text.splitlines():
        if line.startswith("wsad-timeline "):
            return json.loads(line.split(" ", 1)[1])
    return {}


def run(size: str) -> dict:
    extra = SHAPE if size != "tiny" else []
    root = store("quick" if size != "tiny" else "tiny", extra, tag="plain600" if size != "tiny" else "")
    plain = [sys.executable, str(HERE / "plain_topk.py"), str(root), str(EPOCHS)]
    walls: dict[str, list[float]] = {k: [] for k in ("plain", "plain_cluster", "wsad", "wsad_cluster")}
    lines: list[dict] = []
    env = {**os.environ, "WSAD_TIMELINE": "1"}
    with tempfile.TemporaryDirectory() as tmp:
        work = Path(tmp)
        for i in range(REPEATS[size]):
            walls["plain"].append(timed(plain, work)[0])
            wall, out = timed(wsad_cmd(root, work, f"w{i}", False), work, env)
            walls["wsad"].append(wall)
            lines.append(timeline(out))
            walls["plain_cluster"].append(timed(plain + ["--cluster"], work)[0])
            walls["wsad_cluster"].append(timed(wsad_cmd(root, work, f"c{i}", True), work)[0])
    med = {k: statistics.median(v) for k, v in walls.items()}
    stages = {k: statistics.median(t[k] for t in lines if k in t) for k in (lines[0] if lines else {})}
    return {"plain": {"ratio_topk": med["wsad"] / med["plain"],
                      "ratio_cluster": med["wsad_cluster"] / med["plain_cluster"],
                      "wall_s": med, "each_s": walls, "epochs": EPOCHS, "videos": 600 if size != "tiny" else None,
                      "wsad_timeline": stages}}


if __name__ == "__main__":
    emit(run(size_arg()))
