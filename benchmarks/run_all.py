"""Run every benchmark at one size, check the goals, write JSON and print a table.

    python benchmarks/run_all.py quick     # about 5 minutes; writes results/quick.json
    python benchmarks/run_all.py full      # research scale; writes results/full.json
    python benchmarks/run_all.py full research.py   # one script again, merged into full.json

Each script runs in its own process (fresh memory, its own thread settings)
and prints JSON; this merges them with the machine's details. Every goal is
a ratio measured within one process, because these machines are noisy.
"""
from __future__ import annotations

import json
import os
import subprocess
import sys
import time
from pathlib import Path

from _common import machine, size_arg
from tqdm.auto import tqdm

SCRIPTS = ["train_floor.py", "cluster_term.py", "evaluation.py", "memory.py", "scaling.py", "extract.py",
           "sweep.py", "study.py", "plain_vs_wsad.py"]
#: Scripts of research scale only (tens of minutes at full size; tiny checks that they run).
RESEARCH = {"tiny": ["research.py"], "quick": [], "full": ["research.py"]}

# key, goal, "max" (value must be <=) or "min" (>=), what it measures
GOALS = [
    ("train.ratio_to_floor", 1.5, "max", "warm epoch / matrix-product floor (worst recipe)"),
    ("cluster_term.speedup_vs_sklearn", 20.0, "min", "KMeans per video / batched term"),
    ("cluster_term.step_share", 0.15, "max", "share of a training step spent in the term"),
    ("bootstrap.ratio_to_single_auc", 20.0, "max", "1,000 grouped resamples / one roc_auc_score"),
    ("memory.peak_anon_rss_gb", 1.5, "max", "peak anonymous RSS, one epoch on the multi-crop store"),
    ("scaling.exponent", 1.1, "max", "epoch time ~ videos^e"),
    ("eval.frames_per_s", None, None, "metrics + intervals, test frames per second"),
    ("extract.ratio_to_forward", 1.3, "max", "wsad-extract per segment / the backbone's forward alone (r3d_18)"),
    ("extract.peak_rss_ratio", 1.1, "max", "peak anonymous RSS, 10-minute video / 1-minute video"),
    ("extract.segments_per_s", None, None, "wsad-extract segments per second (r3d_18, 1 crop, 2 cores)"),
    ("sweep.efficiency", 0.75, "min",
     "demo sweep (6 runs, 2 workers, hydra/launcher=workers): epoch compute / workers / wall"),
    ("sweep.efficiency_joblib", None, None, "the same sweep on Hydra's joblib launcher"),
    ("sweep.efficiency_bound", None, None, "the most any process-worker sweep of these runs can reach here"),
    ("sweep.efficiency_long", None, None, "the same sweep with 5x the epochs"),
    ("run.overhead_s.cold", 6.0, "max", "one wsad-train process: wall - epoch compute, s (median)"),
    ("run.overhead_s.warm", 1.5, "max", "per run in a warm sweep worker: wall - epoch compute, s"),
    ("study.efficiency_warm", 0.8, "min", "the demo's 6 runs as a Study on 2 warm workers: compute / workers / wall"),
    ("study.overhead_s_per_run", None, None, "that study: (wall x workers - compute) / runs, s"),
    ("plain.ratio_topk", 0.75, "max", "3-epoch wsad-train process / the plain script's (600 videos, 1024-d)"),
    ("plain.ratio_cluster", 0.35, "max", "the same with the k = 2 cluster term (plain: KMeans per video per step)"),
    ("research.ratio_to_floor", 1.2, "max", "research scale, 10 views: warm topk epoch / matrix-product floor"),
    ("research.peak_anon_rss_gb", 2.0, "max", "research scale, 10 views memory-mapped: peak anonymous RSS"),
    ("research.study.efficiency", 0.9, "min", "research scale: 3 variants x 3 seeds on 2 warm workers"),
    ("research.eval_s_per_million_frames", None, None, "research scale: scoring + evaluation per million test frames"),
]


def lookup(result: dict, key: str):
    node = result
    for part in key.split("."):
        node = node[part]
    return node


def check(result: dict) -> list[dict]:
    rows = []
    for key, goal, kind, what in GOALS:
        try:
            value = lookup(result, key)
        except KeyError:   # a script this size does not run (research scale at quick)
            continue
        ok = None if goal is None else (value <= goal if kind == "max" else value >= goal)
        rows.append({"key": key, "value": value, "goal": goal, "kind": kind, "met": ok, "what": what})
    return rows


def table(rows: list[dict], result: dict) -> str:
    lines = ["| measure | value | goal | met |", "|---|---:|---:|:---:|"]
    for r in rows:
        goal = "" if r["goal"] is None else ("<= " if r["kind"] == "max" else ">= ") + f"{r['goal']:g}"
        met = "" if r["met"] is None else ("yes" if r["met"] else "**no**")
        lines.append(f"| `{r['key']}` ({r['what']}) | {r['value']:,.3g} | {goal} | {met} |")
    lines += ["", "| recipe | warm epoch s | floor s | ratio | cold epoch ratio | segments |",
              "|---|---:|---:|---:|---:|---:|"]
    for name, v in result["train"]["recipes"].items():
        lines.append(f"| {name} | {v['epoch_s']:.2f} | {v['floor_s']:.2f} | {v['ratio_to_floor']:.2f} "
                     f"| {v['cold_ratio_to_floor']:.2f} | {v['segments']:,} |")
    if "research" in result:
        lines += ["", research_table(result["research"])]
    if "plain" in result:
        lines += ["", plain_table(result["plain"])]
    return "\n".join(lines)


def research_table(r: dict) -> str:
    """What an ablation costs at research scale (the docs' table)."""
    s = r["study"]
    return "\n".join([
        f"What an ablation costs at research scale ({r['views']} views, {r['store_gb']:.1f} GB store, "
        f"{r['test_frames']:,} test frames):", "",
        "| measure | value |", "|---|---:|",
        f"| one topk epoch (warm), s | {r['epoch_s']:.1f} |",
        f"| its ratio to the matrix-product floor | {r['ratio_to_floor']:.2f} |",
        f"| peak anonymous memory, GB (store memory-mapped) | {r['peak_anon_rss_gb']:.2f} |",
        f"| scoring + evaluation with intervals, s per million test frames | {r['eval_s_per_million_frames']:.2f} |",
        f"| study of 3 variants x 3 seeds, {s['epochs']} epochs each, 2 workers: wall, min | {s['wall_s'] / 60:.1f} |",
        f"| its efficiency (epoch compute / 2 / wall) | {s['efficiency']:.2f} |",
        f"| its overhead per run beyond the epochs, s | {s['overhead_s_per_run']:.1f} |"])


def plain_table(p: dict) -> str:
    """A whole wsad-train process beside the plain script, and where wsad's time goes."""
    w = p["wall_s"]
    marks = p["wsad_timeline"]
    stages, before = [], 0.0
    for name, at in marks.items():
        stages.append(f"{name} {at - before:.1f}")
        before = at
    return "\n".join([
        f"{p['epochs']}-epoch runs, whole processes, wall s: plain script {w['plain']:.1f}, wsad-train "
        f"{w['wsad']:.1f} (ratio {p['ratio_topk']:.2f}); with the cluster term {w['plain_cluster']:.1f} vs "
        f"{w['wsad_cluster']:.1f} (ratio {p['ratio_cluster']:.2f}). wsad-train's own timeline, s per stage: "
        + ", ".join(stages) + "."])


def main() -> int:
    size = size_arg()
    here = Path(__file__).resolve().parent
    results = Path(os.environ.get("WSAD_BENCH_RESULTS", here / "results"))
    out = results / f"{size}.json"
    only = sys.argv[2].split(",") if len(sys.argv) > 2 else None   # re-measure these scripts only
    result: dict = {"size": size, "machine": machine(), "seconds": {}}
    if only and out.is_file():   # the other scripts' figures stay as last measured
        result = {**json.loads(out.read_text()), "machine": machine()}
    started = time.perf_counter()
    for script in tqdm(only or SCRIPTS + RESEARCH[size], desc=f"benchmarks ({size})", unit="script"):
        t = time.perf_counter()
        proc = subprocess.run([sys.executable, str(here / script), size], capture_output=True,
                              text=True, cwd=here)
        if proc.returncode != 0:
            sys.stderr.write(proc.stderr[-3000:])
            print(f"benchmark {script} failed (exit {proc.returncode}); its error is above", file=sys.stderr)
            return 1
        result.update(json.loads(proc.stdout))
        result["seconds"][script] = round(time.perf_counter() - t, 1)
    result["seconds"]["last_call" if only else "total"] = round(time.perf_counter() - started, 1)
    rows = check(result)
    result["goals"] = rows
    result["all_goals_met"] = all(r["met"] for r in rows if r["met"] is not None)
    out.parent.mkdir(exist_ok=True)
    tmp = out.with_suffix(".json.tmp")
    tmp.write_text(json.dumps(result, indent=1, default=float) + "\n")
    tmp.replace(out)
    text = table(rows, result)
    (results / f"{size}.md").write_text(text + "\n")
    print(text)
    print(f"\n{out} written in {time.perf_counter() - started:.0f} s; "
          f"all goals met: {result['all_goals_met']}")
    return 0


if __name__ == "__main__":
    sys.exit(main())
