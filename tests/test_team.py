"""A team's tracking backend, for real: PostgreSQL, `mlflow server` with proxied artifacts and its
basic-auth app, credentials from MLflow's environment variables; sweeps through submitit, refused
credentials, and the server going away mid-sweep (briefly, and past the client's retries)."""
from __future__ import annotations

import os
import subprocess
import sys
import time
from pathlib import Path

import mlflow
import pytest
from team_server import ADMIN, ADMIN_PASSWORD, MlflowServer, Postgres, pg_tool

pytestmark = pytest.mark.skipif(pg_tool("initdb") is None, reason="PostgreSQL is not installed")

USER, PASSWORD = "warehouse-team", "team-password-for-tests"
BASE = ["recipe=topk", "trainer.progress=false", "trainer.bootstrap=0"]


@pytest.fixture(scope="module")
def team_server(tmp_path_factory):
    pg = Postgres()
    server = MlflowServer("", tmp_path_factory.mktemp("team"))
    try:
        pg.start()
        server.backend = pg.uri
        server.start().create_user(USER, PASSWORD)
        yield server
    finally:   # never leave a server or a cluster behind, whatever failed
        server.stop()
        pg.stop()


def _env(user: str | None = USER, password: str | None = PASSWORD, **extra) -> dict:
    env = {k: v for k, v in os.environ.items() if not k.startswith("MLFLOW_TRACKING_")}
    if user:
        env["MLFLOW_TRACKING_USERNAME"] = user
    if password:
        env["MLFLOW_TRACKING_PASSWORD"] = password
    return {**env, **extra}


def wsad_train(cwd: Path, *args: str, env: dict, timeout=900, wait=True):
    code = "import sys; from wsad.cli.train import main; sys.argv=['wsad-train']+sys.argv[1:]; main()"
    cmd = [sys.executable, "-c", code, *args]
    if not wait:
        return subprocess.Popen(cmd, cwd=cwd, env=env, stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True)
    return subprocess.run(cmd, cwd=cwd, capture_output=True, text=True, timeout=timeout, env=env)


def _client(server) -> mlflow.MlflowClient:
    os.environ["MLFLOW_TRACKING_USERNAME"], os.environ["MLFLOW_TRACKING_PASSWORD"] = ADMIN, ADMIN_PASSWORD
    return mlflow.MlflowClient(server.uri)


def _runs(server, experiment: str) -> list:
    client = _client(server)
    exp = client.get_experiment_by_name(experiment)
    found = [] if exp is None else client.search_runs([exp.experiment_id], max_results=1000)
    return [r for r in found if r.data.tags.get("wsad.sweep") != "parent"]   # the trials, not a sweep's parent


def _sweep_through_submitit(server, store, tmp_path, runs: int, concurrent: int) -> None:
    exp = f"team_sweep_{runs}"
    seeds = ",".join(str(i) for i in range(runs))
    res = wsad_train(tmp_path, "-m", f"data.root={store}", "trainer.members=1", *BASE, "trainer.epochs=1",
                     f"seed={seeds}",
                     "trainer.plots=true",   # a sweep leaves plots to wsad-report unless asked; asked here
                     f"tracking.uri={server.uri}", f"tracking.experiment={exp}",
                     "hydra/launcher=submitit_local", "hydra.launcher.timeout_min=20",
                     "hydra.launcher.cpus_per_task=1", f"hydra.sweeper.max_batch_size={concurrent}",
                     env=_env(), timeout=1800)
    assert res.returncode == 0, res.stderr[-3000:]
    found = _runs(server, exp)
    assert len(found) == runs                                       # none lost, none duplicated
    assert sorted(int(r.data.params["seed"]) for r in found) == list(range(runs))
    assert {r.info.status for r in found} == {"FINISHED"}
    client = _client(server)
    for r in found:
        assert r.info.user_id == USER                               # logged with the team's login
        paths = {a.path for sub in ("scores", "model", "plots", "config")
                 for a in client.list_artifacts(r.info.run_id, sub)}
        assert {"scores/test_scores.parquet", "model/checkpoint.pt", "plots/roc.png",
                "config/resolved.yaml"} <= paths, paths
        assert "frame_auc" in r.data.metrics
    # the artifacts went through the server into its own store
    assert len(list((server.folder / "artifacts").rglob("test_scores.parquet"))) >= runs
    assert list((tmp_path / "multirun").glob("*/*/.submitit"))


@pytest.mark.slow   # about 45 s; make test keeps the refused logins on this server
def test_a_small_team_sweep_through_submitit(team_server, small_store, tmp_path):
    # the reduced version in make test: two jobs at once, the same checks as the 16-run sweep
    _sweep_through_submitit(team_server, small_store, tmp_path, runs=2, concurrent=2)


@pytest.mark.slow   # about 3 minutes; the reduced sweep above is its shorter form
def test_sixteen_runs_four_at_a_time(team_server, small_store, tmp_path):
    _sweep_through_submitit(team_server, small_store, tmp_path, runs=16, concurrent=4)


def test_missing_or_wrong_credentials_are_one_line(team_server, small_store, tmp_path):
    args = [f"data.root={small_store}", "trainer.members=1",
            *BASE, "trainer.epochs=1", f"tracking.uri={team_server.uri}",
            "tracking.experiment=refused"]
    for env, said in ((_env(None, None), "refused a request without credentials"),
                      (_env(USER, "not-the-password"), f"refused the password of user '{USER}'")):
        res = wsad_train(tmp_path, *args, env=env)
        assert res.returncode == 2, res.stderr[-2000:]
        lines = [line for line in res.stderr.splitlines() if line.strip()]
        assert len(lines) == 1 and said in lines[0] and "(HTTP 401)" in lines[0], res.stderr
        assert "MLFLOW_TRACKING_USERNAME and MLFLOW_TRACKING_PASSWORD" in lines[0]
    assert not _runs(team_server, "refused")


def _wait_for_epochs(server, experiment: str, runs: int, step: int, proc, timeout=600) -> None:
    """Until ``runs`` runs have logged train_loss at ``step`` (fails at once if ``proc`` ended)."""
    deadline = time.time() + timeout
    while time.time() < deadline:
        if proc.poll() is not None:
            raise AssertionError(f"wsad-train ended early: {proc.stderr.read()[-3000:]}")
        try:
            found = _runs(server, experiment)
            client = _client(server)
            done = [r for r in found if any(m.step >= step for m in client.get_metric_history(r.info.run_id,
                                                                                                "train_loss"))]
            if len(done) >= runs:
                return
        except Exception:  # noqa: BLE001 - the server may be starting
            pass
        time.sleep(0.5)
    raise AssertionError(f"{runs} run(s) never reached epoch {step}")


@pytest.mark.slow   # about 90 s; the long outage below too (make test-slow)
def test_a_short_outage_mid_sweep_loses_nothing(team_server, small_store, tmp_path):
    exp, epochs = "outage_short", 16
    proc = wsad_train(tmp_path, "-m", f"data.root={small_store}", "trainer.members=1",
                                      *BASE, f"trainer.epochs={epochs}",
                      "seed=0,1,2,3", f"tracking.uri={team_server.uri}", f"tracking.experiment={exp}",
                      "hydra/launcher=joblib", "hydra.launcher.n_jobs=2", env=_env(), wait=False)
    _wait_for_epochs(team_server, exp, 1, 2, proc)
    team_server.stop()                     # the server crashes mid-sweep ...
    time.sleep(10)
    team_server.start()                    # ... and is back 10 s (plus its start-up) later
    out, err = proc.communicate(timeout=900)
    assert proc.returncode == 0, err[-3000:]
    found = _runs(team_server, exp)
    assert len(found) == 4 and {r.info.status for r in found} == {"FINISHED"}
    client = _client(team_server)
    for r in found:   # complete: every epoch's loss, and the final metrics
        steps = sorted({m.step for m in client.get_metric_history(r.info.run_id, "train_loss")})
        assert steps == list(range(1, epochs + 1))
        assert {"frame_auc", "alarm/threshold", "selected_epoch"} <= set(r.data.metrics)


@pytest.mark.slow   # about 70 s (three training processes and the client's retry budget)
def test_a_long_outage_stops_the_run_cleanly_and_it_resumes(team_server, small_store, tmp_path):
    exp, epochs = "outage_long", 16
    args = [f"data.root={small_store}", "trainer.members=1", *BASE, f"trainer.epochs={epochs}", "seed=5",
            f"tracking.uri={team_server.uri}", f"tracking.experiment={exp}"]
    # a short retry budget (MLflow's documented variables) so the client gives up within seconds
    quick = {"MLFLOW_HTTP_REQUEST_MAX_RETRIES": "1", "MLFLOW_HTTP_REQUEST_BACKOFF_FACTOR": "1",
             "MLFLOW_HTTP_REQUEST_TIMEOUT": "5"}
    proc = wsad_train(tmp_path, *args, f"hydra.run.dir={tmp_path}/cut", env=_env(**quick), wait=False)
    _wait_for_epochs(team_server, exp, 1, 2, proc)
    team_server.stop()
    out, err = proc.communicate(timeout=600)
    assert proc.returncode == 75, err[-3000:]                       # EX_TEMPFAIL: try again later
    lines = [line for line in err.splitlines() if line.strip() and "Warning" not in line
             and not line.startswith(" ")]
    run_id = _runs_id_from(lines[-1])
    assert "does not answer" in lines[-1] and f"trainer.resume={run_id}" in lines[-1], err[-2000:]
    assert "Traceback" not in err
    assert (tmp_path / "cut" / "state" / "resume.pt").is_file()
    team_server.start()
    res = wsad_train(tmp_path, f"trainer.resume={run_id}", f"tracking.uri={team_server.uri}",
                     f"data.root={small_store}", "trainer.members=1", env=_env())
    assert res.returncode == 0, res.stderr[-3000:]
    whole = wsad_train(tmp_path, *args, "tracking.experiment=outage_reference", f"hydra.run.dir={tmp_path}/ref",
                       env=_env())
    assert whole.returncode == 0, whole.stderr[-3000:]
    resumed = _client(team_server).get_run(run_id)
    reference = _runs(team_server, "outage_reference")[0]
    assert resumed.info.status == "FINISHED" and resumed.info.user_id == USER   # the team's login
    paths = {a.path for a in _client(team_server).list_artifacts(run_id, "scores")}
    assert "scores/test_scores.parquet" in paths                                # through the server
    for m in ("frame_auc", "frame_ap", "video_auc", "alarm/threshold", "selected_epoch"):
        assert resumed.data.metrics[m] == reference.data.metrics[m], m   # the same final scores
    steps = sorted({m.step for m in _client(team_server).get_metric_history(run_id, "train_loss")})
    assert steps == list(range(1, epochs + 1))


def _runs_id_from(line: str) -> str:
    return line.split("trainer.resume=", 1)[1].split()[0].strip(".,;")
