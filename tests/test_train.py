"""The training loop end to end: recipes learn, logs agree with the exported
scores (checked with scikit-learn), commands behave."""
from __future__ import annotations

import subprocess
import sys

import mlflow
import numpy as np
import pandas as pd
import pytest
import torch
from conftest import CountTorchCalls, make_store
from sklearn.metrics import roc_auc_score

from wsad.config import compose_config
from wsad.errors import WsadError
from wsad.train import train

# small budgets that still learn on the default scenario
BUDGET = {"topk": ["trainer.epochs=4"], "windows": ["trainer.epochs=3"],
          "mil_ranking": ["trainer.epochs=10"]}


def run(store, tmp_path, recipe, extra=(), tracking=True):
    uri = f"sqlite:///{tmp_path}/mlruns.db"
    cfg = compose_config([f"data.root={store}", "trainer.members=1", f"recipe={recipe}", "trainer.progress=false",
                          f"trainer.out_dir={tmp_path}/out_{recipe}", f"tracking.uri={uri}",
                          f"tracking.enabled={str(tracking).lower()}", "trainer.bootstrap=200",
                          *BUDGET.get(recipe, []), *extra])
    res = train(cfg)
    return res.objective, {**res.metrics, "out_dir": str(res.out_dir), "run_id": res.run_id}, uri


@pytest.mark.parametrize("recipe", ["topk", "windows", "mil_ranking"])
def test_recipe_learns_and_logs_match_parquet(demo_store, tmp_path, recipe):
    # what a run logs and exports; whether recipes learn is checked on open data (tests/test_digits.py)
    value, res, uri = run(demo_store, tmp_path, recipe)
    client = mlflow.MlflowClient(uri)
    r = client.get_run(res["run_id"])
    assert r.info.status == "FINISHED"
    for name in ("frame_auc", "frame_ap", "anomalous_video_auc", "false_alarm_rate", "video_auc",
                 "train_loss"):
        assert name in r.data.metrics
    assert any(k.startswith("term/") for k in r.data.metrics)
    assert len(client.get_metric_history(res["run_id"], "train_loss")) == int(
        r.data.params["trainer.epochs"])
    # the logged frame_auc is scikit-learn's AUC on the exported parquet (reference: sklearn)
    local = client.download_artifacts(res["run_id"], "scores/test_scores.parquet", str(tmp_path))
    table = pd.read_parquet(local)
    assert list(table.columns) == ["video", "frame", "score", "label", "group"]
    lab = table[table.label >= 0]
    assert r.data.metrics["frame_auc"] == pytest.approx(roc_auc_score(lab.label, lab.score), abs=1e-12)
    arts = {a.path for a in client.list_artifacts(res["run_id"], "plots")}
    assert {"plots/roc.png", "plots/timelines.png"} <= arts
    assert {a.path for a in client.list_artifacts(res["run_id"], "model")} == {"model/checkpoint.pt"}
    assert r.data.params["seed"] == "0" and "data.fingerprint" in r.data.params
    # the camera is the unit of the intervals, the jackknife the default
    assert r.data.params["trainer.bootstrap_by"] == "group" and r.data.params["trainer.interval"] == "jackknife"
    assert res["frame_auc_lo"] < r.data.metrics["frame_auc"] < res["frame_auc_hi"]
    assert value == pytest.approx(r.data.metrics["weak_val_video_auc"])


def test_same_seed_same_scores_other_seed_differs(small_store, tmp_path):
    a = run(small_store, tmp_path / "a", "topk", ["trainer.epochs=2"], tracking=False)[1]
    b = run(small_store, tmp_path / "b", "topk", ["trainer.epochs=2"], tracking=False)[1]
    c = run(small_store, tmp_path / "c", "topk", ["trainer.epochs=2", "seed=1"], tracking=False)[1]
    sa, sb, sc = (pd.read_parquet(f"{r['out_dir']}/scores/test_scores.parquet").score for r in (a, b, c))
    assert sa.equals(sb)
    assert not sa.equals(sc)


def test_any_part_added_by_override(small_store, tmp_path):
    _, res, _ = run(small_store, tmp_path, "windows",
                    ["trainer.epochs=1", "objective.cluster_distance=1e-3", "head=gated_attention",
                     "bags.order=sequential"], tracking=False)
    h = pd.read_csv(f"{res['out_dir']}/scores/history.csv")
    assert "term/cluster_distance" in h.columns and h["term/cluster_distance"].iloc[0] > 0
    cfg = compose_config([f"data.root={small_store}", "trainer.members=1", "recipe=mil_ranking", "head=temporal",
                          "objective.bag_bce=0.5"])
    assert cfg.head._target_.endswith("TemporalConvHead") and cfg.bags.chunks == 32
    assert cfg.objective.ranking_hinge == 1.0 and cfg.objective.bag_bce == 0.5


def test_each_crop_as_its_own_bag(tmp_path):
    # data.crops=each: every view is its own training bag, and a test video's score is the mean
    # of its views' scores (the evaluation convention for multi-crop features).
    from wsad.checkpoint import load_checkpoint, model_from_checkpoint
    from wsad.store import FeatureStore
    from wsad.train import build

    st = make_store(tmp_path / "mc", overrides=["crops=3"])
    _, res, _ = run(st, tmp_path, "topk", ["trainer.epochs=1", "data.crops=each"], tracking=False)
    cfg = compose_config([f"data.root={st}", "trainer.members=1", "recipe=topk", "data.crops=each",
                          "tracking.enabled=false",
                          f"trainer.out_dir={tmp_path}/b"])
    s = build(cfg)
    assert len(s.items) == 3 * len(s.fit_videos) and {it.view for it in s.items} == {0, 1, 2}
    model, _, std = model_from_checkpoint(load_checkpoint(f"{res['out_dir']}/model/checkpoint.pt"))
    store = FeatureStore(st, crops="each")
    table = pd.read_parquet(f"{res['out_dir']}/scores/test_scores.parquet")
    for v in store.videos("test")[:3]:
        views = std(store.views(v))
        mask = torch.ones(1, views.shape[1], dtype=torch.bool)
        with torch.no_grad():
            mean = np.mean([model(torch.from_numpy(x), mask).scores[0].numpy() for x in views], axis=0)
        got = table[(table.video == v) & (table.frame % store.segment_frames == 0)].score.to_numpy()
        np.testing.assert_allclose(got[:len(mean)], mean, rtol=1e-5, atol=1e-6)


@pytest.mark.parametrize("recipe", ["topk", "windows", "mil_ranking"])
def test_training_step_has_no_per_video_loop(small_store, tmp_path, recipe):
    """One step's torch calls do not grow with the number of bags in the batch."""
    from wsad.train import build, objective

    s = build(compose_config([f"data.root={small_store}", "trainer.members=1",
                              f"recipe={recipe}", "tracking.enabled=false",
                              "objective.cluster_distance=1e-3", "terms.cluster_distance.n_iter=1",
                              f"trainer.out_dir={tmp_path}"]))
    items = s.items
    if hasattr(s.bags, "size"):  # full windows only, so both batch sizes take the same (equal-length) path
        items = [it for it in items if it.length == s.bags.size]
    counts = []
    for n in (2, 6):
        pos = [it for it in items if it.label == 1][:n]
        neg = [it for it in items if it.label == 0][:n]
        batch = s.loader.collate(pos + neg)
        if batch.pairs is not None:
            batch.pairs = torch.stack([torch.arange(n), torch.arange(n, 2 * n)], 1)
        torch.manual_seed(0)
        with CountTorchCalls() as mode:
            loss, _ = objective(s.model, s.pooling, s.terms, batch)
            loss.backward()
        counts.append(mode.calls)
    assert counts[0] == counts[1]


def _cli(tmp_path, *args):
    code = f"import sys; from wsad.cli.{args[0]} import main; sys.argv=['x']+sys.argv[1:]; main()"
    return subprocess.run([sys.executable, "-c", code, *args[1:]], capture_output=True, text=True,
                          cwd=tmp_path, timeout=300)


def test_console_train_and_score(small_store, tmp_path):
    res = _cli(tmp_path, "train", f"data.root={small_store}", "trainer.members=1", "recipe=topk", "trainer.epochs=2",
               f"hydra.run.dir={tmp_path}/run")
    assert res.returncode == 0, res.stderr[-2000:]
    assert (tmp_path / "mlruns.db").exists()
    # the end line leads with the primary metric and its interval, then the operating point
    first, point = res.stdout.splitlines()[:2]
    assert first.startswith("wsad-train: frame_auc 0.") and first.split()[3].startswith("[")
    assert "false_alarm_rate" not in res.stdout and "operating point at 1 false alarm(s)" in point
    # the progress bar shows the loss and weak validation, never a test metric
    assert "loss=" in res.stderr and "weak_val=" in res.stderr and "auc=" not in res.stderr
    # warnings: one readable line each, no source line
    warned = [ln for ln in res.stderr.splitlines() if "warning:" in ln]
    assert warned and all(ln.startswith("wsad-train: warning: ") for ln in warned)
    assert "UserWarning" not in res.stderr and "warnings.warn" not in res.stderr
    exported = pd.read_parquet(tmp_path / "run" / "scores" / "test_scores.parquet")
    res = _cli(tmp_path, "score", f"checkpoint={tmp_path}/run/model/checkpoint.pt",
               f"data.root={small_store}", f"out={tmp_path}/again.parquet")
    assert res.returncode == 0, res.stderr
    again = pd.read_parquet(tmp_path / "again.parquet")
    pd.testing.assert_frame_equal(exported, again)
    res = _cli(tmp_path, "score", f"checkpoint={tmp_path}/run/model/checkpoint.pt",
               f"data.root={small_store}", f"out={tmp_path}/again.parquet")
    assert res.returncode == 2 and "exists" in res.stderr


def test_bad_training_config_is_one_clear_line(small_store, tmp_path):
    res = _cli(tmp_path, "train", f"data.root={small_store}", "trainer.members=1", "head=transformer")
    assert res.returncode != 0 and "Traceback" not in res.stderr
    assert "gated_attention" in res.stderr  # lists the known heads
    res = _cli(tmp_path, "train", f"data.root={small_store}", "trainer.members=1", "objective.bag_bce=-1",
               "tracking.enabled=false")
    assert res.returncode == 2 and "must be >= 0" in res.stderr and "Traceback" not in res.stderr
    with pytest.raises(WsadError, match="every objective weight is 0"):
        train(compose_config([f"data.root={small_store}", "trainer.members=1", "objective.bag_bce=0",
                              "tracking.enabled=false"]))


def test_step_is_the_update_the_loop_makes(small_store, tmp_path):
    # The loop's first epoch is step() over the epoch's batches: replaying them with step() on a
    # freshly built setup (same seed) gives the same parameters as a 1-epoch run, bit for bit.
    from wsad.checkpoint import load_checkpoint
    from wsad.train import build, seed_everything, step

    over = [f"data.root={small_store}", "trainer.members=1",
            "recipe=windows", "tracking.enabled=false", "trainer.epochs=1",
            "trainer.progress=false", "trainer.bootstrap=0", "trainer.select=last", f"trainer.out_dir={tmp_path}"]
    train(compose_config(over))
    trained = load_checkpoint(tmp_path / "model" / "checkpoint.pt")["state_dict"]
    cfg = compose_config(over)
    seed_everything(int(cfg.seed), cfg.trainer.threads)
    s = build(cfg)
    s.model.train()
    losses = []
    for b in s.bags.batches(s.items, 1, int(cfg.seed)):
        losses.append(step(s.model, s.pooling, s.terms, s.loader.collate([s.items[i] for i in b]),
                           s.optimizer).loss)
    for name, value in s.model.state_dict().items():
        assert torch.equal(value, trained[name]), name
    history = pd.read_csv(tmp_path / "scores" / "history.csv")
    assert history.train_loss.iloc[0] == pytest.approx(sum(losses) / len(losses), rel=1e-12)
