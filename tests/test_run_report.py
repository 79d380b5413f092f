"""A run's outcome is a value: evaluating a run's exported scores repeats its logged metrics,
the run folder holds a summary, two runs in one process log to their own MLflow runs, MLflow
is imported in one module only, settings are typed and every metric is declared once."""
from __future__ import annotations

import ast
import json
import subprocess
import sys

import mlflow
import numpy as np
import pandas as pd
import pytest
from conftest import REPO

from wsad.config import compose_config
from wsad.errors import WsadError
from wsad.evaluate import CATALOGUE, evaluate_scores
from wsad.train import train

COMMON = ["recipe=topk", "trainer.epochs=3", "trainer.progress=false", "seed=2"]


@pytest.fixture(scope="module")
def tracked(small_store, tmp_path_factory):
    """One run logged to a fresh SQLite store, with a transfer store (itself)."""
    work = tmp_path_factory.mktemp("tracked")
    uri = f"sqlite:///{work}/mlruns.db"
    res = train(compose_config([f"data.root={small_store}", "trainer.members=1", *COMMON, f"tracking.uri={uri}",
                                f"trainer.out_dir={work}/run", f"evaluate.stores=[{small_store}]"]))
    return res, uri


def test_evaluating_a_runs_exported_scores_repeats_every_logged_test_metric(small_store, tracked):
    res, uri = tracked
    logged = mlflow.MlflowClient(uri).get_run(res.run_id).data.metrics
    settings = json.loads((res.out_dir / "summary.json").read_text())["evaluation"]
    settings.pop("heldout_fitted")
    folder = res.out_dir / "scores"
    ev = evaluate_scores(small_store, folder / "test_scores.parquet", folder / "heldout_scores.parquet", **settings)
    own = {k for k in logged if not k.startswith(("transfer/", "selection", "selected_epoch", "weak_val",
                                                  "train_", "term/", "time/"))}
    assert len(own) >= 20 and {"frame_auc_lo", "alarm/threshold", "video_threshold"} <= own
    # test metrics recomputed from the exported files equal the logged ones exactly, not nearly
    assert {k: ev.metrics[k] for k in own} == {k: logged[k] for k in own}
    # the same scores one row per segment (a segment covers 16 frames) give the same metrics
    from wsad.store import FeatureStore

    store = FeatureStore(small_store)
    frames = pd.read_parquet(folder / "test_scores.parquet")
    seg = frames[frames.frame % 16 == 0].assign(segment=lambda d: d.frame // 16)
    seg = seg[seg.segment < seg.video.map(store.n_segments)]   # the last segment also covers the tail
    ev2 = evaluate_scores(small_store, seg[["video", "segment", "score"]], folder / "heldout_scores.parquet",
                          **settings)
    assert {k: ev2.metrics[k] for k in own} == {k: logged[k] for k in own}


def test_evaluate_scores_refuses_scores_it_cannot_place(small_store, tracked):
    res, _ = tracked
    scores = pd.read_parquet(res.out_dir / "scores" / "test_scores.parquet")
    with pytest.raises(WsadError, match="needs columns video, segment, score"):
        evaluate_scores(small_store, scores.rename(columns={"frame": "t"}))
    with pytest.raises(WsadError, match="is not in the store's test split"):
        evaluate_scores(small_store, scores.assign(video="bay_99_cam"))
    with pytest.raises(WsadError, match="missing or infinite score"):
        evaluate_scores(small_store, scores.assign(score=np.where(scores.frame == 3, np.nan, scores.score)))
    with pytest.raises(WsadError, match="one score per frame"):
        evaluate_scores(small_store, scores[scores.frame != 5])
    with pytest.raises(WsadError, match="unknown setting"):
        evaluate_scores(small_store, scores, budgett=2)
    one = scores[scores.video == scores.video.iloc[0]]
    with pytest.warns(UserWarning, match="test video\\(s\\) have no scores"):
        evaluate_scores(small_store, pd.concat([one, scores[scores.video != one.video.iloc[0]].iloc[:0]]),
                        bootstrap=0)


def test_the_run_folder_holds_a_summary(tracked):
    res, _ = tracked
    summary = json.loads((res.out_dir / "summary.json").read_text())
    m = summary["metrics"]
    assert m["frame_auc"] == {"value": res.metrics["frame_auc"], "lo": res.metrics["frame_auc_lo"],
                              "hi": res.metrics["frame_auc_hi"]}
    assert {k: v["value"] for k, v in m.items()} == {k: v for k, v in res.metrics.items()
                                                     if not (k.endswith(("_lo", "_hi")) and k[:-3] in m)}
    assert summary["run_id"] == res.run_id and summary["warnings"] == res.warnings
    assert list(m)[:2] == ["frame_auc", "frame_ap"]      # catalogue order
    assert len(summary["settings_fingerprint"]) == 16


def test_settings_fingerprint_ignores_bookkeeping_only(small_store):
    from wsad.store import store_fingerprint
    from wsad.tracking.params import settings_fingerprint

    fp = store_fingerprint(small_store)
    base = compose_config([f"data.root={small_store}", "trainer.members=1", *COMMON])
    same = compose_config([f"data.root={small_store}", "trainer.members=1",
                           *COMMON, "trainer.out_dir=/elsewhere", "data.cache_mb=64",
                           "trainer.progress=true", "tracking.experiment=other", "trainer.threads=1"])
    other_seed = compose_config([f"data.root={small_store}", "trainer.members=1", *COMMON, "seed=3"])
    other_lr = compose_config([f"data.root={small_store}", "trainer.members=1", *COMMON, "optim.lr=0.01"])
    assert settings_fingerprint(base, fp) == settings_fingerprint(same, fp)
    assert len({settings_fingerprint(c, fp) for c in (base, other_seed, other_lr)}) == 3
    assert settings_fingerprint(base, fp) != settings_fingerprint(base, "another store")


def test_two_runs_in_one_process_log_to_their_own_runs(small_store, tmp_path):
    uri = f"sqlite:///{tmp_path}/mlruns.db"
    a = train(compose_config([f"data.root={small_store}", "trainer.members=1", *COMMON, f"tracking.uri={uri}", "seed=0",
                              f"trainer.out_dir={tmp_path}/a", "trainer.bootstrap=0"]))
    b = train(compose_config([f"data.root={small_store}", "trainer.members=1", *COMMON, f"tracking.uri={uri}", "seed=1",
                              "recipe=windows", f"trainer.out_dir={tmp_path}/b", "trainer.bootstrap=0"]))
    client = mlflow.MlflowClient(uri)
    assert a.run_id != b.run_id
    for res, seed, recipe in ((a, "0", "topk"), (b, "1", "windows")):
        run = client.get_run(res.run_id)
        assert run.info.status == "FINISHED" and run.data.params["seed"] == seed
        assert run.data.params["recipe_name"] == recipe
        assert run.data.metrics["frame_auc"] == res.metrics["frame_auc"]
        steps = [m.step for m in client.get_metric_history(res.run_id, "train_loss")]
        assert steps == [1, 2, 3]                            # each run its own epochs, once
        assert run.data.tags["mlflow.source.type"] == "LOCAL" and "mlflow.parentRunId" not in run.data.tags
        (inp,) = run.inputs.dataset_inputs                   # the store, its fingerprint as digest
        from wsad.store import store_fingerprint
        assert inp.dataset.digest == store_fingerprint(small_store)
    assert a.metrics["frame_auc"] != b.metrics["frame_auc"]
    assert not mlflow.active_run()                           # no module-global run was used


def test_mlflow_is_imported_in_one_module_and_not_by_evaluation():
    importers = []
    for path in (REPO / "wsad").rglob("*.py"):
        for node in ast.walk(ast.parse(path.read_text())):
            names = [a.name for a in node.names] if isinstance(node, ast.Import) else (
                [node.module or ""] if isinstance(node, ast.ImportFrom) else [])
            if any(n == "mlflow" or n.startswith("mlflow.") for n in names):
                importers.append(str(path.relative_to(REPO)))
    assert set(importers) == {"wsad/tracking/client.py"}
    code = "import sys, wsad.evaluate, wsad.evaluate.evaluation; print('mlflow' in sys.modules)"
    out = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, timeout=120)
    assert out.stdout.strip() == "False", out.stderr[-2000:]


def test_every_reported_and_console_metric_is_in_the_catalogue():
    from wsad.evaluate import catalogue

    assert catalogue.lead() == "frame_auc"
    assert set(catalogue.console()) <= set(catalogue.reported()) <= set(CATALOGUE)
    table = catalogue.markdown()
    assert all(f"`{name}`" in table for name in CATALOGUE)
    with pytest.raises(WsadError, match="already in the catalogue"):
        catalogue.add(CATALOGUE["frame_auc"])


def test_varying_only_a_bookkeeping_key_does_not_split_variants():
    from wsad.report.runs import varying_params

    runs = pd.DataFrame({"params.seed": ["0", "1", "0", "1"], "params.data.cache_mb": ["512", "512", "64", "64"],
                         "params.trainer.out_dir": ["a", "b", "c", "d"], "params.optim.lr": ["0.001"] * 4,
                         "params.trainer.eval_every": ["1", "1", "5", "5"]})
    assert varying_params(runs) == []
    assert varying_params(runs.assign(**{"params.optim.lr": ["0.001", "0.001", "0.01", "0.01"]})) == ["optim.lr"]


def test_typed_settings_hold_their_defaults_in_one_place():
    from wsad.settings import SCHEMAS, settings_table

    for group in SCHEMAS:   # the group's YAML only extends the schema: no default written twice
        text = (REPO / "conf" / group / "default.yaml").read_text()
        keys = [ln.split(":")[0] for ln in text.splitlines() if ln and not ln.startswith(("#", " ", "-"))]
        assert keys == ["defaults"], (group, keys)
    cfg = compose_config(["data.root=x"])
    table = {r["key"] for r in settings_table()}
    for group in SCHEMAS:
        assert {f"{group}.{k}" for k in cfg[group]} == {k for k in table if k.startswith(group + ".")}


def test_evaluate_command_writes_the_report_folder(small_store, tracked, tmp_path):
    res, _ = tracked
    code = "import sys; from wsad.cli.evaluate import main; sys.argv=['wsad-evaluate']+sys.argv[1:]; main()"
    scores, held = res.out_dir / "scores" / "test_scores.parquet", res.out_dir / "scores" / "heldout_scores.parquet"

    def cli(*args):
        return subprocess.run([sys.executable, "-c", code, *map(str, args)], capture_output=True, text=True,
                              timeout=300, cwd=tmp_path)

    out = cli(scores, "--store", small_store, "--heldout", held, "--out", tmp_path / "rep", "seed=2", "--no-plots")
    assert out.returncode == 0, out.stderr[-2000:]
    assert out.stdout.startswith("wsad-evaluate: frame_auc ")
    summary = json.loads((tmp_path / "rep" / "summary.json").read_text())
    assert summary["metrics"]["frame_auc"]["lo"] == res.metrics["frame_auc_lo"]
    assert summary["metrics"]["alarm/threshold"]["value"] == res.metrics["alarm/threshold"]
    assert (tmp_path / "rep" / "scores" / "det_frames.csv").is_file()
    for args, expect in [((scores, "--store", small_store, "--out", tmp_path / "rep"), "is not empty"),
                         ((tmp_path / "none.parquet", "--store", small_store), "does not exist"),
                         ((scores, "--store", small_store, "budgte=2"), "unknown setting 'budgte'")]:
        bad = cli(*args)
        lines = [ln for ln in bad.stderr.splitlines() if ln.strip()]
        assert bad.returncode == 2 and len(lines) == 1 and expect in lines[0], bad.stderr


def test_train_help_is_a_page_of_its_own():
    code = "import sys; from wsad.cli.train import main; sys.argv=['wsad-train','--help']; main()"
    res = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, timeout=120)
    assert res.returncode == 0, res.stderr
    from wsad.registry import options

    lines = res.stdout.splitlines()
    for recipe in options("recipe"):   # every recipe in one line, read from its YAML
        (line,) = [ln for ln in lines if ln.startswith(f"  {recipe} ")]
        assert len(line.split()) > 4
    assert "examples:" in res.stdout and "wsad-train -m " in res.stdout and "--cfg job" in res.stdout
    assert len(lines) < 40 and "hydra/launcher" in res.stdout
