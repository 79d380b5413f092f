"""Sweeps: a sound tracking store under parallel workers, submitit jobs, a real
MLflow server, and the presets."""
from __future__ import annotations

import os
import socket
import sqlite3
import subprocess
import sys
import time
import urllib.request
from pathlib import Path

import mlflow
import pytest

from wsad.config import compose_config

BASE = ["trainer.epochs=1", "trainer.progress=false", "trainer.bootstrap=0"]


def wsad_train(cwd: Path, *args: str, timeout=600) -> subprocess.CompletedProcess:
    code = "import sys; from wsad.cli.train import main; sys.argv=['wsad-train']+sys.argv[1:]; main()"
    return subprocess.run([sys.executable, "-c", code, *args], cwd=cwd, capture_output=True,
                          text=True, timeout=timeout)


def _runs(db: Path) -> list[tuple]:
    con = sqlite3.connect(db)
    try:
        return con.execute("select status from runs").fetchall()
    finally:
        con.close()


def _integrity(db: Path) -> str:
    con = sqlite3.connect(db)
    try:
        return con.execute("PRAGMA integrity_check").fetchone()[0]
    finally:
        con.close()


def test_workers_launcher_default_matches_its_early_start():
    from omegaconf import OmegaConf

    from wsad.resources import CONF_DIR
    from wsad.sweep import DEFAULT_JOBS, workers_wanted

    assert OmegaConf.load(Path(CONF_DIR) / "hydra" / "launcher" / "workers.yaml").n_jobs == DEFAULT_JOBS
    assert workers_wanted(["-m", "hydra/launcher=workers"]) == DEFAULT_JOBS
    assert workers_wanted(["-m", "hydra/launcher=workers", "hydra.launcher.n_jobs=3"]) == 3
    assert workers_wanted(["hydra/launcher=workers"]) == 0 and workers_wanted(["-m", "hydra/launcher=joblib"]) == 0


def test_eight_runs_four_workers_fresh_sqlite(small_store, tmp_path):
    """wsad's own launcher (hydra/launcher=workers: workers started before Hydra composes the sweep)
    on a fresh SQLite store; a trial's scores are those of the same run
    trained in this process (bit for bit)."""
    res = wsad_train(tmp_path, "-m", f"data.root={small_store}", "trainer.members=1", "recipe=topk,windows",
                     "seed=0,1,2,3", *BASE, "hydra/launcher=workers", "hydra.launcher.n_jobs=4")
    assert res.returncode == 0, res.stderr[-3000:]
    assert res.stdout.count("  run folder ") == 8
    from wsad.train import train
    # with the thread count a sweep's worker uses (one): on some CPUs torch splits a reduction
    # differently over two threads, and the last bits differ (seen on one machine type)
    alone = train(compose_config([f"data.root={small_store}", "trainer.members=1", "recipe=windows", "seed=3",
                                  *BASE, "trainer.threads=1", "tracking.enabled=false",
                                  f"trainer.out_dir={tmp_path / 'alone'}"]))
    (folder,) = [f for f in tmp_path.glob("multirun/*/*/*/.hydra/overrides.yaml")
                 if {"recipe=windows", "seed=3"} <= set(__import__("yaml").safe_load(f.read_text()))]
    import pandas as pd
    pd.testing.assert_frame_equal(pd.read_parquet(folder.parents[1] / "scores" / "test_scores.parquet"),
                                  alone.scores.reset_index(drop=True), check_like=True, check_dtype=False,
                                  check_exact=True)
    db = tmp_path / "mlruns.db"
    assert [s for (s,) in _runs(db)] == ["FINISHED"] * 9   # 8 trials and the sweep's parent run
    assert _integrity(db) == "ok"
    client = mlflow.MlflowClient(f"sqlite:///{db}")
    runs = client.search_runs([client.get_experiment_by_name("wsad").experiment_id])
    (parent,) = [r for r in runs if r.data.tags.get("wsad.sweep") == "parent"]
    trials = [r for r in runs if r is not parent]
    # one parent run, every trial its child (the MLflow UI nests them), the store as dataset input
    assert {r.data.tags.get("mlflow.parentRunId") for r in trials} == {parent.info.run_id}
    from wsad.store import store_fingerprint
    assert {d.dataset.digest for r in trials for d in r.inputs.dataset_inputs} == {store_fingerprint(small_store)}
    names = {r.info.run_name for r in trials}
    # readable names: recipe, the overrides that changed something, seed (not data.root)
    assert "windows trainer.members=1 trainer.epochs=1 trainer.bootstrap=0 seed=3" in names
    assert len(names) == 8
    # trainer.plots=auto: a sweep's runs export their scores and leave the plots to the report
    scored = list(tmp_path.glob("multirun/*/*/*/scores/test_scores.parquet"))
    assert len(scored) == 8 and not list(tmp_path.glob("multirun/*/*/*/plots"))
    # the report over that sweep: both variants, intervals, p-values, plots
    code = "import sys; from wsad.cli.report import main; sys.argv=['wsad-report']+sys.argv[1:]; main()"
    rep = subprocess.run([sys.executable, "-c", code, "--tracking-uri", f"sqlite:///{db}",
                          "--experiment", "wsad", "--out", str(tmp_path / "report")],
                         capture_output=True, text=True, timeout=300, cwd=tmp_path)
    assert rep.returncode == 0, rep.stderr[-2000:]
    assert "recipe=topk" in rep.stdout and "recipe=windows" in rep.stdout
    table = __import__("pandas").read_csv(tmp_path / "report" / "report.csv")
    fa = table[table.metric == "frame_auc"]
    assert (fa["n"] == 4).all() and fa["lo"].notna().all() and fa["p_wilcoxon"].notna().sum() == 1
    # the two-level interval (test cameras and seeds) from the runs' exported scores equals the
    # one computed from the run folders on disk (same draws: seed 0, 500 resamples)
    from omegaconf import OmegaConf

    from wsad.report.two_level import two_level_table
    folders: dict = {}
    for f in scored:
        over = dict(o.split("=", 1) for o in OmegaConf.load(f.parents[1] / ".hydra" / "overrides.yaml"))
        folders.setdefault(f"recipe={over['recipe']}", {})[int(over["seed"])] = str(f.parents[1])
    base = fa[fa.p_t.isna()].variant.iloc[0]
    want = two_level_table(folders, base, n=500).set_index("variant")
    other = fa[fa.variant != base].iloc[0]
    assert other["diff_two_level_lo"] == pytest.approx(want.loc[other.variant, "diff_two_level_lo"])
    assert other["diff_two_level_hi"] == pytest.approx(want.loc[other.variant, "diff_two_level_hi"])
    assert "cameras and seeds" in rep.stdout
    recall = table[table.metric == "alarm/event_recall"]   # the operating point, over seeds too
    assert len(recall) == 2 and (recall["n"] == 4).all()
    for png in ("frame_auc_by_variant.png", "roc_overlay.png", "learning_curves.png", "timelines.png",
                "det_overlay.png"):
        assert (tmp_path / "report" / png).stat().st_size > 10_000


def test_store_made_in_a_thread_while_the_process_opens_it(tmp_path, monkeypatch):
    """The sweep hook makes a fresh SQLite store in a thread while the launcher starts; a job
    run in the same process (the basic launcher) opening it meanwhile must neither migrate
    the same file nor see half a store."""
    from omegaconf import OmegaConf

    from wsad import tracking
    from wsad.sweep import PrepareTracking
    from wsad.tracking import sqlite as tracking_store
    from wsad.tracking.parent import PARENT_FILE

    for name in ("WSAD_LAUNCH_DIR", tracking_store.LAUNCHER_PREPARES, "MLFLOW_TRACKING_URI", PARENT_FILE):
        monkeypatch.setenv(name, "")   # what the hook sets for its workers goes away after the test
    monkeypatch.chdir(tmp_path)
    db = tmp_path / "fresh.db"
    cfg = OmegaConf.create({"tracking": {"enabled": True, "uri": f"sqlite:///{db}", "experiment": "bays"}})
    hook = PrepareTracking()
    hook.on_multirun_start(cfg)
    exp_id = tracking.prepare(f"sqlite:///{db}", "bays")   # at once, from this thread
    hook.on_multirun_end(cfg)
    assert _integrity(db) == "ok"
    client = mlflow.MlflowClient(f"sqlite:///{db}")
    assert [e.experiment_id for e in client.search_experiments() if e.name == "bays"] == [exp_id]
    assert not list(tmp_path.glob(".fresh.db.*"))           # no half-made copy left beside it


def test_worker_waits_for_the_store_its_launcher_makes(tmp_path):
    """A worker started while its launcher makes the SQLite store waits for it rather than
    migrating a copy of its own (no MLflow import, no copy beside it); were the launcher gone,
    it makes the store itself."""
    from wsad.tracking import sqlite as tracking_store

    db = tmp_path / "bays.db"
    code = ("import sys; from wsad.tracking import client; client.ensure_store(sys.argv[1]); "
            "print('mlflow' in sys.modules)")

    def worker(launcher_pid: int) -> subprocess.Popen:
        env = {**os.environ, tracking_store.LAUNCHER_PREPARES: f"{socket.gethostname()} {launcher_pid} {db}"}
        return subprocess.Popen([sys.executable, "-c", code, f"sqlite:///{db}"], env=env, text=True,
                                stdout=subprocess.PIPE, stderr=subprocess.PIPE)

    waiting = worker(os.getpid())            # this test plays the launcher
    time.sleep(2.0)
    assert waiting.poll() is None and not db.exists()    # still waiting, nothing made
    from wsad.tracking.client import ensure_store
    ensure_store(f"sqlite:///{db}")
    out, err = waiting.communicate(timeout=60)
    assert waiting.returncode == 0, err[-2000:]
    assert out.split() == ["False"] and not list(tmp_path.glob(".bays.db.*"))
    db.unlink()
    gone = subprocess.Popen([sys.executable, "-c", "pass"])
    gone.wait()
    orphan = worker(gone.pid)                # its launcher has exited: it makes the store
    out, err = orphan.communicate(timeout=120)
    assert orphan.returncode == 0 and out.split() == ["True"] and _integrity(db) == "ok", err[-2000:]


def test_sweep_through_submitit_local(small_store, tmp_path):
    res = wsad_train(tmp_path, "-m", f"data.root={small_store}", "trainer.members=1", "recipe=topk", "seed=0,1", *BASE,
                     "hydra/launcher=submitit_local", "hydra.launcher.timeout_min=10",
                     "hydra.launcher.cpus_per_task=1")
    assert res.returncode == 0, res.stderr[-3000:]
    db = tmp_path / "mlruns.db"
    assert [s for (s,) in _runs(db)] == ["FINISHED"] * 3   # 2 trials and the sweep's parent run
    assert list((tmp_path / "multirun").glob("*/*/.submitit"))  # real submitit jobs ran


def _free_port() -> int:
    with socket.socket() as s:
        s.bind(("127.0.0.1", 0))
        return s.getsockname()[1]


@pytest.fixture
def mlflow_server(tmp_path):
    port = _free_port()
    exe = Path(sys.executable).with_name("mlflow")
    proc = subprocess.Popen([str(exe), "server", "--host", "127.0.0.1", "--port", str(port),
                             "--backend-store-uri", f"sqlite:///{tmp_path}/server.db",
                             "--artifacts-destination", str(tmp_path / "server_artifacts"),
                             "--workers", "1"],
                            stdout=subprocess.DEVNULL, stderr=subprocess.DEVNULL, cwd=tmp_path,
                            env={**os.environ, "MLFLOW_SERVER_ENABLE_JOB_EXECUTION": "false"})
    url = f"http://127.0.0.1:{port}"
    deadline = time.time() + 120
    while time.time() < deadline:
        try:
            with urllib.request.urlopen(f"{url}/health", timeout=2) as r:
                if r.status == 200:
                    break
        except OSError:
            time.sleep(0.5)
    else:
        proc.kill()
        pytest.fail("mlflow server did not come up")
    yield url, tmp_path / "server_artifacts"
    proc.terminate()
    proc.wait(timeout=30)


def test_parallel_workers_log_to_a_real_server(small_store, tmp_path, mlflow_server):
    url, artifact_root = mlflow_server
    work = tmp_path / "work"
    work.mkdir()
    res = wsad_train(work, "-m", f"data.root={small_store}", "trainer.members=1", "recipe=topk", "seed=0,1", *BASE,
                     f"tracking.uri={url}", "tracking.experiment=served", "hydra/launcher=joblib",
                     "hydra.launcher.n_jobs=2")
    assert res.returncode == 0, res.stderr[-3000:]
    client = mlflow.MlflowClient(url)
    exp = client.get_experiment_by_name("served")
    runs = client.search_runs([exp.experiment_id])
    assert len(runs) == 3 and {r.info.status for r in runs} == {"FINISHED"}   # 2 trials and their parent
    runs = [r for r in runs if r.data.tags.get("wsad.sweep") != "parent"]
    for r in runs:
        paths = {a.path for a in client.list_artifacts(r.info.run_id, "scores")}
        assert "scores/test_scores.parquet" in paths
    # the artifacts went through the server to its own store, not to the worker's folder
    assert len(list(artifact_root.rglob("test_scores.parquet"))) == 2
    assert not (work / "mlruns").exists() and not (work / "mlartifacts").exists()


def test_sweep_presets_compose():
    cfg = compose_config(["data.root=x", "sweep=[terms,seeds]"], return_hydra_config=True)
    params = cfg.hydra.sweeper.params
    assert params["ablation.toggle"] == "none,smoothness,sparsity,cluster_distance"
    assert params["seed"] == "0,1,2,3,4"
    cfg = compose_config(["data.root=x", "sweep=bags"], return_hydra_config=True)
    assert cfg.hydra.sweeper.params["bags"] == "windows_sequential,windows,whole,pairs"
    cfg = compose_config(["data.root=x", "sweep=optuna"], return_hydra_config=True)
    assert cfg.hydra.sweeper.direction == "maximize"
    assert not any("frame" in k or "test" in k for k in cfg.hydra.sweeper.params)


def test_ablation_toggle_switches_one_term(small_store):
    from wsad.train import apply_ablation

    cfg = compose_config([f"data.root={small_store}", "trainer.members=1",
                          "recipe=windows", "ablation.toggle=smoothness"])
    apply_ablation(cfg)
    assert cfg.objective.smoothness == 0.0 and cfg.objective.video_bce == 1.0
    cfg = compose_config([f"data.root={small_store}", "trainer.members=1",
                          "recipe=windows", "ablation.toggle=cluster_distance"])
    apply_ablation(cfg)
    assert cfg.objective.cluster_distance == 1e-3
    cfg = compose_config([f"data.root={small_store}", "trainer.members=1", "recipe=windows", "bags=windows_sequential"])
    assert cfg.bags.order == "sequential" and cfg.bags.size == 32


def test_optuna_search_runs_on_weak_validation(small_store, tmp_path):
    res = wsad_train(tmp_path, "-m", f"data.root={small_store}", "trainer.members=1", "recipe=topk", "sweep=optuna",
                     "hydra.sweeper.n_trials=2", *BASE, "tracking.enabled=false")
    assert res.returncode == 0, res.stderr[-3000:]
    best = list((tmp_path / "multirun").glob("*/*/optimization_results.yaml"))
    assert best and "best_value" in best[0].read_text()


def test_ctrl_c_stops_a_workers_sweep_with_each_trial_resumable(small_store, tmp_path):
    """Ctrl-C reaches the whole process group; the launcher alone decides: its running trials
    stop after their step with their resume state (one line each), queued ones never start,
    and no worker is left behind."""
    import signal

    code = "import sys; from wsad.cli.train import main; sys.argv=['wsad-train']+sys.argv[1:]; main()"
    proc = subprocess.Popen([sys.executable, "-c", code, "-m", f"data.root={small_store}", "trainer.members=1",
                             "recipe=topk", "seed=0,1,2,3", "trainer.epochs=500", "trainer.progress=false",
                             "trainer.bootstrap=0", "hydra/launcher=workers", "hydra.launcher.n_jobs=2",
                             f"hydra.sweep.dir={tmp_path}/sweep"], cwd=tmp_path, stdout=subprocess.PIPE,
                            stderr=subprocess.STDOUT, text=True, start_new_session=True)
    deadline = time.monotonic() + 300
    while len(list(tmp_path.glob("sweep/*/state/resume.pt"))) < 2 and time.monotonic() < deadline:
        time.sleep(0.2)    # both workers are in their trials' epochs
    os.killpg(proc.pid, signal.SIGINT)
    out, _ = proc.communicate(timeout=300)
    assert proc.returncode == 130, out[-3000:]
    assert out.count("resume with trainer.resume=") == 2 and "sweep stopped by signal 2" in out, out[-3000:]
    assert sorted(p.name for p in (tmp_path / "sweep").iterdir() if p.is_dir()) == ["0", "1"]
    deadline = time.monotonic() + 30   # the resource tracker ends as its pipe closes
    while (alive := subprocess.run(["pgrep", "-g", str(proc.pid)], capture_output=True, text=True).stdout.split()) \
            and time.monotonic() < deadline:
        time.sleep(0.2)
    assert alive == [], subprocess.run(["ps", "-o", "pid,cmd", "-g", str(proc.pid)], capture_output=True,
                                       text=True).stdout
