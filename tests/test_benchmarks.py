"""Every benchmark script runs end to end at a tiny size, so none can rot.

No timing is asserted (timings live in benchmarks/results/*.json); what is
checked is that each goal's figure is produced and means what it says."""
from __future__ import annotations

import json
import math
import os
import subprocess
import sys
from pathlib import Path

import pytest

ROOT = Path(__file__).resolve().parents[1]


@pytest.mark.slow   # about 2.5 minutes: every script end to end (make test-slow, and make bench runs them all)
def test_every_benchmark_runs_at_tiny_size(tmp_path):
    env = {**os.environ, "WSAD_BENCH_WORK": str(tmp_path / "work"),
           "WSAD_BENCH_RESULTS": str(tmp_path / "results")}
    proc = subprocess.run([sys.executable, "run_all.py", "tiny"], cwd=ROOT / "benchmarks", env=env,
                          capture_output=True, text=True, timeout=900)
    assert proc.returncode == 0, proc.stderr[-2000:]
    result = json.loads((tmp_path / "results" / "tiny.json").read_text())
    for goal in result["goals"]:
        assert math.isfinite(goal["value"]), goal
    assert set(result["train"]["recipes"]) == {"topk", "windows", "mil_ranking"}
    for rec in result["train"]["recipes"].values():
        # the floor is measured over the epoch's own segment count, and is a real time
        assert rec["segments"] > 0 and rec["floor_s"] > 0
        assert rec["ratio_to_floor"] == rec["epoch_s"] / rec["floor_s"]
    # the fast bootstrap equals the per-resample recomputation on the same indices
    assert result["bootstrap"]["max_diff_vs_naive"] < 1e-9
    # the memory child really trained: more anonymous memory at peak than after imports
    assert result["memory"]["peak_anon_rss_gb"] > result["memory"]["after_imports_gb"]
    assert result["memory"]["crops"] == 3 and result["memory"]["store_gb"] > 0
    assert result["scaling"]["videos"] == sorted(result["scaling"]["videos"])
    assert 0 < result["cluster_term"]["inertia_ratio"] < 2
    assert "| measure | value | goal | met |" in proc.stdout
    assert result["machine"]["cpus"] >= 1
    ex = result["extract"]   # the pipeline really extracted the clips the forward-alone figure ran
    assert ex["segments"] > 0 and ex["rss_segments"]["long"] > ex["rss_segments"]["short"] >= 8
    assert set(ex["forward_segments_per_s"]) == {"r3d_18", "mc3_18", "r2plus1d_18"}
    sw = result["sweep"]   # the demo sweep's six runs, each with its epoch compute logged
    assert sw["runs"] == 6 and 0 < sw["compute_s"] and 0 < sw["efficiency"] <= 1
    assert sw["efficiency"] == sw["compute_s"] / 2 / sw["wall_s"]
    assert 0 < sw["import_floor_s"] and sw["efficiency_bound"] <= 1
    assert len(result["run"]["warm_each_s"]) == 2 and result["run"]["overhead_s"]["warm"] > 0
    assert result["run"]["overhead_s"]["cold"] > 0
    pl = result["plain"]   # the whole-process ratio beside the plain script, and wsad's own timeline
    assert pl["ratio_topk"] == pl["wall_s"]["wsad"] / pl["wall_s"]["plain"] > 0
    marks = list(pl["wsad_timeline"].values())
    assert {"imports", "build", "epochs", "evaluate", "end"} <= set(pl["wsad_timeline"]) and marks == sorted(marks)
    assert pl["wsad_timeline"]["end"] < pl["wall_s"]["wsad"]
    st = result["study"]   # the warm study's six runs, each with its epoch compute recorded
    assert st["runs"] == 6 and 0 < st["compute_s"] and 0 < st["efficiency_warm"] <= 1
    assert st["efficiency_warm"] == st["compute_s"] / 2 / st["wall_s"]
