"""Reliability: bad input never crashes, interrupted runs resume exactly, hard
kills leave every store readable, checkpoints load safely."""
from __future__ import annotations

import io
import json
import os
import pickle
import signal
import sqlite3
import subprocess
import sys
import time
from pathlib import Path

import mlflow
import numpy as np
import pandas as pd
import pytest
import torch
from conftest import REPO, tree_hash
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from wsad.store import check_store, store_fingerprint

CLI = "import sys; from wsad.cli.{0} import main; sys.argv=['x']+sys.argv[1:]; main()"


def cli(cwd, name, *args, timeout=600, **kw):
    return subprocess.run([sys.executable, "-c", CLI.format(name), *args], cwd=cwd,
                          capture_output=True, text=True, timeout=timeout, **kw)


# --- bad input: random malformed stores -------------------------------------------------
def _tiny_store(root: Path) -> Path:
    rng = np.random.default_rng(0)
    (root / "features").mkdir(parents=True)
    rows = []
    for i in range(4):
        t = 5 + i
        np.save(root / "features" / f"v{i}.npy", rng.standard_normal((t, 3)).astype(np.float32))
        rows.append({"video": f"v{i}", "file": f"features/v{i}.npy", "label": i % 2,
                     "split": "train" if i < 2 else "test", "group": f"g{i // 2}", "frames": t * 16})
    pd.DataFrame(rows).to_csv(root / "manifest.csv", index=False)
    pd.DataFrame([{"video": "v3", "start": 0, "end": 20}]).to_csv(root / "events.csv", index=False)
    (root / "store.json").write_text(json.dumps({"format": 1, "dim": 3, "segment_frames": 16}))
    return root


FILES = ["manifest.csv", "events.csv", "store.json", "features/v0.npy", "features/v3.npy"]
mutation = st.one_of(
    st.tuples(st.just("delete"), st.sampled_from(FILES)),
    st.tuples(st.just("truncate"), st.sampled_from(FILES), st.floats(0, 1)),
    st.tuples(st.just("garble"), st.sampled_from(FILES), st.binary(min_size=1, max_size=40), st.floats(0, 1)),
    st.tuples(st.just("cell"), st.sampled_from(["manifest.csv", "events.csv"]), st.integers(0, 5),
              st.integers(0, 5), st.text(max_size=12)),
)


def _apply(root: Path, m) -> None:
    path = root / m[1]
    if not path.exists():
        return
    if m[0] == "delete":
        path.unlink()
    elif m[0] == "truncate":
        data = path.read_bytes()
        path.write_bytes(data[:int(len(data) * m[2])])
    elif m[0] == "garble":
        data = bytearray(path.read_bytes())
        at = int(len(data) * m[3])
        data[at:at + len(m[2])] = m[2]
        path.write_bytes(bytes(data))
    elif m[0] == "cell":
        lines = path.read_text(errors="replace").splitlines()
        if lines:
            r = m[2] % len(lines)
            cells = lines[r].split(",")
            cells[m[3] % len(cells)] = m[4].replace("\n", " ")
            lines[r] = ",".join(cells)
            path.write_text("\n".join(lines) + "\n")


@settings(max_examples=60, deadline=None, suppress_health_check=[HealthCheck.function_scoped_fixture])
@given(st.lists(mutation, min_size=1, max_size=4))
def test_random_malformed_stores_never_crash(tmp_path_factory, mutations):
    root = _tiny_store(tmp_path_factory.mktemp("bad") / "store")
    for m in mutations:
        _apply(root, m)
    before = tree_hash(root)
    problems = check_store(root)  # must not raise
    assert all(p.severity in ("error", "warning") and p.message for p in problems)
    from wsad.cli import check

    err = io.StringIO()
    out = io.StringIO()
    old = sys.argv, sys.stdout, sys.stderr
    sys.argv, sys.stdout, sys.stderr = ["wsad-check", str(root)], out, err
    try:
        with pytest.raises(SystemExit) as ex:
            check.main()
    finally:
        sys.argv, sys.stdout, sys.stderr = old
    assert ex.value.code in (0, 2)
    assert "Traceback" not in err.getvalue() and "internal error" not in err.getvalue()
    if ex.value.code == 2:
        assert "problem(s)" in err.getvalue()
    assert tree_hash(root) == before


def test_train_refuses_a_broken_store_in_one_line(small_store, tmp_path):
    import shutil

    root = Path(shutil.copytree(small_store, tmp_path / "store"))
    m = pd.read_csv(root / "manifest.csv")
    a = np.load(root / m.file[0])
    a[0, 0] = np.nan
    np.save(root / m.file[0], a)
    before = tree_hash(root)
    res = cli(tmp_path, "train", f"data.root={root}", "trainer.members=1", "tracking.enabled=false")
    assert res.returncode == 2 and "Traceback" not in res.stderr
    lines = [ln for ln in res.stderr.splitlines() if ln.strip()]
    assert len(lines) == 1 and m.video[0] in lines[0] and "wsad-check" in lines[0]
    assert tree_hash(root) == before


@pytest.mark.parametrize("args,expect", [
    (["head=transformer"], "choose one of: dilated, gated_attention, mlp, self_attention, temporal"),
    (["recipe=nope"], "choose one of: magnitude, mil_ranking, self_training, topk, windows"),
    (["bags=crops"], "choose one of:"),
    (["objective.foo=1"], "known terms: bag_bce, cluster_distance"),
    (["objective.sparsity=-1"], "must be >= 0"),
    (["recipe=windows", "bags.size=0"], "must be >= 1"),
    (["recipe=windows", "bags.order=random"], "use one of ['sequential', 'shuffled']"),
    (["trainer.select=best_test"], "trainer.select=best_test; use one of last, weak_val"),
    (["trainer.plots=sometimes"], "trainer.plots=sometimes; use one of true, false, auto"),
    (["trainer.epoch=3"], "trainer.epoch is not a setting; did you mean trainer.epochs?"),
    (["+trainer.epoch=3"], "trainer.epoch is not a setting; did you mean trainer.epochs?"),
    (["trainer.epochs=three"], "trainer.epochs=three: trainer.epochs takes a whole number"),
    (["evaluate.budgte=2"], "evaluate.budgte is not a setting; did you mean evaluate.budget?"),
    (["trainer.schedule=cosine"], "use schedule=NAME"),
    (["pooling=attention"], "needs a head that gives attention"),
    (["pooling=median"], "choose one of: attention, max, mean, topk"),
    ([], None),
])
def test_bad_configuration_is_one_clear_line(small_store, tmp_path, args, expect):
    root = [f"data.root={small_store}", "trainer.members=1"] if expect is not None else []
    res = cli(tmp_path, "train", *root, *args, "tracking.enabled=false", "trainer.epochs=1")
    assert res.returncode == 2, res.stderr
    lines = [ln for ln in res.stderr.splitlines() if ln.strip()]
    assert len(lines) == 1, res.stderr
    assert (expect or "data.root=DIR is required") in lines[0]


# --- interruption and resumption -------------------------------------------------------------
def _state_epoch(path: Path) -> int:
    try:
        return int(torch.load(path, weights_only=True)["epoch"])
    except Exception:  # noqa: BLE001 - not written yet
        return 0


def test_sigterm_after_epoch_two_then_resume_gives_identical_scores(small_store, tmp_path):
    # 24 epochs: the signal must land while epochs remain (with 6, a busy machine let the
    # last four end before it arrived, and the run finished normally)
    common = [f"data.root={small_store}", "trainer.members=1",
              "recipe=topk", "trainer.epochs=24", "trainer.progress=false",
              "trainer.bootstrap=0", "seed=3"]
    ref = cli(tmp_path, "train", *common, f"hydra.run.dir={tmp_path}/ref", "tracking.experiment=ref")
    assert ref.returncode == 0, ref.stderr[-2000:]
    code = CLI.format("train")
    proc = subprocess.Popen([sys.executable, "-c", code, *common, f"hydra.run.dir={tmp_path}/cut",
                             "tracking.experiment=cut"], cwd=tmp_path, stdout=subprocess.PIPE,
                            stderr=subprocess.PIPE, text=True)
    state = tmp_path / "cut" / "state" / "resume.pt"
    deadline = time.time() + 300
    while _state_epoch(state) < 3 and time.time() < deadline:  # epochs 1 and 2 are done
        time.sleep(0.05)
    proc.send_signal(signal.SIGTERM)
    _, err = proc.communicate(timeout=300)
    assert proc.returncode == 128 + signal.SIGTERM, err[-2000:]
    assert "resume with trainer.resume=" in err and "Traceback" not in err
    run_id = err.split("trainer.resume=")[1].split()[0]
    client = mlflow.MlflowClient(f"sqlite:///{tmp_path}/mlruns.db")
    assert client.get_run(run_id).info.status == "KILLED"
    assert 2 <= len(client.get_metric_history(run_id, "train_loss")) < 24
    res = cli(tmp_path, "train", f"trainer.resume={run_id}", "trainer.progress=false",
              "tracking.experiment=cut", f"hydra.run.dir={tmp_path}/resumed")
    assert res.returncode == 0, res.stderr[-2000:]
    a = pd.read_parquet(tmp_path / "ref" / "scores" / "test_scores.parquet")
    b = pd.read_parquet(tmp_path / "resumed" / "scores" / "test_scores.parquet")
    pd.testing.assert_frame_equal(a, b)  # identical scores, not merely close
    run = client.get_run(run_id)
    assert run.info.status == "FINISHED"
    assert [m.step for m in client.get_metric_history(run_id, "train_loss")] == list(range(1, 25))
    exp = client.get_experiment_by_name("cut")
    assert len(client.search_runs([exp.experiment_id])) == 1  # one run, continued


def test_resume_of_unknown_or_finished_run_is_a_clear_error(small_store, tmp_path):
    res = cli(tmp_path, "train", "trainer.resume=0123456789abcdef", "trainer.progress=false")
    assert res.returncode == 2 and "no such run" in res.stderr and "Traceback" not in res.stderr
    assert "no tracking store there" in res.stderr and not (tmp_path / "mlruns.db").exists()  # none made
    mlflow.MlflowClient(f"sqlite:///{tmp_path}/mlruns.db").search_experiments()   # a store, without the run
    res = cli(tmp_path, "train", "trainer.resume=0123456789abcdef", "trainer.progress=false")
    assert res.returncode == 2 and "no such run" in res.stderr and "Traceback" not in res.stderr
    assert "no tracking store there" not in res.stderr


@pytest.mark.parametrize("delay", [pytest.param(3.0, marks=pytest.mark.slow), pytest.param(5.0, marks=pytest.mark.slow),
                                   7.5, pytest.param(10.0, marks=pytest.mark.slow)])
def test_hard_kill_leaves_stores_readable_and_a_rerun_works(small_store, tmp_path, delay):
    fp = store_fingerprint(small_store)
    before = tree_hash(small_store)
    common = [f"data.root={small_store}", "trainer.members=1",
              "recipe=topk", "trainer.epochs=4", "trainer.progress=false",
              "trainer.bootstrap=50", f"hydra.run.dir={tmp_path}/run"]
    proc = subprocess.Popen([sys.executable, "-c", CLI.format("train"), *common], cwd=tmp_path,
                            stdout=subprocess.DEVNULL, stderr=subprocess.DEVNULL)
    time.sleep(delay)
    proc.kill()  # SIGKILL: no handler runs
    proc.wait()
    # the feature store is untouched
    assert tree_hash(small_store) == before and store_fingerprint(small_store) == fp
    assert [p for p in check_store(small_store) if p.severity == "error"] == []
    db = tmp_path / "mlruns.db"
    if db.exists():
        con = sqlite3.connect(db)
        assert con.execute("PRAGMA integrity_check").fetchone()[0] == "ok"
        con.close()
    # no half-written artifact is taken for a whole one: what has its final name is complete
    for p in (tmp_path / "run").rglob("*"):
        if p.suffix == ".parquet":
            pd.read_parquet(p)
        elif p.suffix == ".pt":
            torch.load(p, weights_only=True)
        elif p.suffix == ".png":
            assert p.read_bytes()[-8:-4] == b"IEND"
    # a rerun (resume when a checkpoint exists, else a fresh run) finishes
    runs = []
    if db.exists():
        client = mlflow.MlflowClient(f"sqlite:///{db}")
        exp = client.get_experiment_by_name("wsad")
        runs = client.search_runs([exp.experiment_id]) if exp else []
    state = tmp_path / "run" / "state" / "resume.pt"
    if runs and state.exists() and runs[0].info.status != "FINISHED":
        res = cli(tmp_path, "train", f"trainer.resume={runs[0].info.run_id}", "trainer.progress=false",
                  f"hydra.run.dir={tmp_path}/again")
    else:
        res = cli(tmp_path, "train", *common[:-1], f"hydra.run.dir={tmp_path}/again")
    assert res.returncode == 0, res.stderr[-2000:]
    assert pd.read_parquet(tmp_path / "again" / "scores" / "test_scores.parquet").score.notna().all()


# --- safe loading --------------------------------------------------------------------------
class _Payload:
    def __init__(self, marker):
        self.marker = marker

    def __reduce__(self):
        return (os.system, (f"touch {self.marker}",))


def test_crafted_checkpoint_is_refused_without_running_code(small_store, tmp_path):
    marker = tmp_path / "payload_ran"
    bad = tmp_path / "evil.pt"
    torch.save({"state_dict": {}, "config": "x: 1", "extra": _Payload(marker)}, bad)
    res = cli(tmp_path, "score", f"checkpoint={bad}", f"data.root={small_store}",
              f"out={tmp_path}/s.parquet")
    assert res.returncode == 2 and "refused" in res.stderr and "Traceback" not in res.stderr
    assert not marker.exists()  # the payload's side effect did not happen
    assert not (tmp_path / "s.parquet").exists()
    # the same object through plain pickle would have run it: the test can fail
    pickle.loads(pickle.dumps(_Payload(marker)))
    assert marker.exists()


def test_services_bind_to_loopback():
    out = subprocess.run(["make", "-n", "ui"], cwd=REPO, capture_output=True, text=True)
    assert "--host 127.0.0.1" in out.stdout


def test_tracking_failures_are_read_by_their_http_status_only():
    # a run id holding "401" is not a refused login; an HTTP 401/403/503 from a server is
    from wsad.tracking import read_failure

    read = lambda m, uri="http://127.0.0.1:5000": type(read_failure(Exception(m), uri)).__name__  # noqa: E731
    assert read("API request to endpoint /x failed with error code 401 != 200") == "WsadError"
    assert read("error code 403 != 200") == "WsadError"
    assert read("503 Server Error: Service Unavailable") == "TrackingUnavailable"
    assert read("HTTPConnectionPool(host='127.0.0.1'): Max retries exceeded") == "TrackingUnavailable"
    assert read("RESOURCE_DOES_NOT_EXIST: Run 'ab401cd4019' not found") == "NoneType"
    assert read("error code 401 != 200", "sqlite:///mlruns.db") == "NoneType"   # no HTTP server, no status


def test_epoch_rows_not_yet_sent_when_a_run_dies_are_logged_on_resume(small_store, tmp_path, monkeypatch):
    """Epoch rows go to the tracking store every few seconds while the resume state is saved
    every epoch: a run that dies in between has a state holding epochs the store lacks. The
    resumed run logs exactly those, once, and ends with the scores of an uninterrupted run."""
    from wsad.config import compose_config
    from wsad.train import loop, train

    monkeypatch.setenv("MLFLOW_TRACKING_URI", "")   # MLflow sets it for child processes; undone after
    uri = f"sqlite:///{tmp_path}/mlruns.db"
    common = [f"data.root={small_store}", "trainer.members=1",
              "recipe=topk", "trainer.epochs=5", "trainer.progress=false",
              "trainer.bootstrap=0", "seed=4", f"tracking.uri={uri}"]
    monkeypatch.setattr(loop, "LOG_EVERY_S", float("inf"))     # nothing sent before the last epoch
    evaluate = loop._evaluate_epoch

    def dies_in_epoch_4(cfg, s, epoch):
        if epoch == 4:
            raise RuntimeError("power cut")
        return evaluate(cfg, s, epoch)

    monkeypatch.setattr(loop, "_evaluate_epoch", dies_in_epoch_4)
    with pytest.raises(RuntimeError, match="power cut"):
        train(compose_config([*common, "tracking.experiment=cut", f"trainer.out_dir={tmp_path}/cut"]))
    client = mlflow.MlflowClient(uri)
    (cut,) = client.search_runs([client.get_experiment_by_name("cut").experiment_id])
    assert cut.info.status == "FAILED" and client.get_metric_history(cut.info.run_id, "train_loss") == []
    monkeypatch.setattr(loop, "_evaluate_epoch", evaluate)
    resumed = train(compose_config([*common, "tracking.experiment=cut", f"trainer.resume={cut.info.run_id}"]))
    whole = train(compose_config([*common, "tracking.experiment=whole", f"trainer.out_dir={tmp_path}/whole"]))
    history = client.get_metric_history(cut.info.run_id, "train_loss")
    assert sorted(m.step for m in history) == [1, 2, 3, 4, 5]                  # each epoch once
    reference = {m.step: m.value for m in client.get_metric_history(whole.run_id, "train_loss")}
    assert {m.step: m.value for m in history} == reference
    assert client.get_run(cut.info.run_id).info.status == "FINISHED"
    for key in ("frame_auc", "frame_ap", "video_auc", "selected_epoch"):
        assert resumed.metrics[key] == whole.metrics[key], key


@pytest.mark.parametrize("chosen,expect", [(None, "true"), ("false", "false")])
def test_commands_opt_out_of_mlflow_telemetry_unless_the_user_chose(chosen, expect):
    """wsad's commands set MLFLOW_DISABLE_TELEMETRY=true (its threads held every exit ~3 s
    here) unless the user set it; MLflow's own check then agrees."""
    env = {k: v for k, v in os.environ.items() if k != "MLFLOW_DISABLE_TELEMETRY"}
    if chosen is not None:
        env["MLFLOW_DISABLE_TELEMETRY"] = chosen
    code = ("import os, wsad.cli.train; print(os.environ['MLFLOW_DISABLE_TELEMETRY']); "
            "from mlflow.environment_variables import MLFLOW_DISABLE_TELEMETRY as V; print(V.get())")
    out = subprocess.run([sys.executable, "-c", code], env=env, capture_output=True, text=True, timeout=120)
    assert out.returncode == 0, out.stderr[-1000:]
    assert out.stdout.split() == [expect, str(expect == "true")]
