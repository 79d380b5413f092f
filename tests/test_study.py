"""Studies and runs as objects: a study resumes instead of retraining (no MLflow run added), a
failing variant is a row while the others finish, presets expand from Python, runs come back as
typed DataFrames and Figures, and the widgets show what an independent computation gives."""
from __future__ import annotations

import subprocess
import sys

import matplotlib
import mlflow
import numpy as np
import pandas as pd
import pytest

from wsad import Study, load_run
from wsad.errors import WsadError

matplotlib.use("Agg")
BASE = {"recipe": "topk", "trainer.epochs": 2, "trainer.bootstrap": 50, "trainer.members": 1}


@pytest.fixture(scope="module")
def study(small_store, tmp_path_factory):
    work = tmp_path_factory.mktemp("study")
    base = {**BASE, "tracking.uri": f"sqlite:///{work}/mlruns.db"}
    s = Study(small_store, base=base, variants=[{"head": "mlp"}, {"head": "gated_attention"},
                                                {"objective.sparsity": -1}],   # the last cannot train
              seeds=[0, 1], folder=work / "ablation", name="heads")
    status = s.run(jobs=2)
    return s, status, work


def _count_runs(uri: str, experiment: str) -> int:
    client = mlflow.MlflowClient(uri)
    return len(client.search_runs([client.get_experiment_by_name(experiment).experiment_id]))


def test_a_failing_variant_is_a_row_and_the_others_finish(study):
    s, status, _ = study
    assert list(status.status) == ["done"] * 4 + ["failed"] * 2
    failed = status[status.status == "failed"]
    assert failed.error.str.contains("objective.sparsity=-1.0: weights must be >= 0").all()
    report = s.report()
    assert list(report.failures.variant) == ["objective.sparsity=-1"] * 2
    assert "Failed runs" in report._repr_html_() and "weights must be >= 0" in report.to_markdown()
    t = report.table[report.table.metric == "frame_auc"]
    assert list(t.variant) == ["head=mlp", "head=gated_attention"] and list(t.n) == [2, 2]


def test_running_the_study_again_trains_nothing_and_adds_no_mlflow_run(study):
    s, _, work = study
    uri = f"sqlite:///{work}/mlruns.db"
    before = _count_runs(uri, "heads")
    assert before == 5               # 4 finished runs and the parent (the failing ones fail before logging)
    folders = {p: p.stat().st_mtime_ns for p in (s.folder / "runs").glob("*/summary.json")}
    again = Study(s.stores, base={**BASE, "tracking.uri": uri},
                  variants=[{"head": "mlp"}, {"head": "gated_attention"}], seeds=[0, 1], folder=s.folder,
                  name="heads")
    status = again.run(jobs=2)
    assert list(status.status) == ["done"] * 4
    assert _count_runs(uri, "heads") == before               # nothing trained, nothing logged
    assert {p: p.stat().st_mtime_ns for p in folders} == folders
    client = mlflow.MlflowClient(uri)
    runs = client.search_runs([client.get_experiment_by_name("heads").experiment_id])
    (parent,) = [r for r in runs if r.data.tags.get("wsad.sweep") == "parent"]
    assert {r.data.tags.get("mlflow.parentRunId") for r in runs if r is not parent} == {parent.info.run_id}


def test_report_display_and_exports(study):
    s, _, _ = study
    report = s.report()
    html = report._repr_html_()
    assert "head=gated_attention" in html and "Holm" in html and "p (Holm)" in html
    md = report.to_markdown()
    assert md.splitlines()[0].startswith("| variant | n | frame_auc mean ± sd")
    assert "\\begin{tabular}" in report.to_latex()
    csv = pd.read_csv(__import__("io").StringIO(report.to_csv()))
    assert {"variant", "metric", "mean", "p_holm", "store"} <= set(csv.columns)
    for fig in (report.plot(), report.plot_roc(), report.plot_timelines(), report.plot_learning_curves()):
        assert isinstance(fig, matplotlib.figure.Figure) and fig.axes and fig.axes[0].has_data()
    plan = s.plan(effect=0.05)
    assert plan.counts() == {"done": 4, "failed": 2}
    seeds = plan.seeds[plan.seeds.metric == "frame_auc"]
    assert len(seeds) == 1 and seeds.alpha.iloc[0] == pytest.approx(0.05 / 2)   # Holm's strictest step


def test_presets_expand_from_python(small_store, tmp_path):
    terms = Study(small_store, base=BASE, variants="terms", seeds=1, folder=tmp_path / "t")
    assert [v["ablation.toggle"] for v in terms.variants] == ["none", "smoothness", "sparsity", "cluster_distance"]
    bags = Study(small_store, base=BASE, variants="bags", seeds=None, folder=tmp_path / "b")
    assert [v["bags"] for v in bags.variants] == ["windows_sequential", "windows", "whole", "pairs"]
    seeds = Study(small_store, base=BASE, variants="seeds", seeds=None, folder=tmp_path / "s")
    assert seeds.seeds == [0, 1, 2, 3, 4] and seeds.variants == [{}]
    with pytest.raises(WsadError, match="is a search, not a grid"):
        Study(small_store, variants="optuna", folder=tmp_path / "o")
    with pytest.raises(WsadError, match="no sweep preset 'term'; known: bags, none, optuna, seeds, terms"):
        Study(small_store, variants="term", folder=tmp_path / "x")
    with pytest.raises(WsadError, match="leave seed and data.root out"):
        Study(small_store, base={"seed": 3}, folder=tmp_path / "y")


def test_load_run_gives_typed_frames_and_figures(study):
    s, _, work = study
    run = s.load(variant="head=mlp", seed=0)
    assert load_run(run.folder).metrics == run.metrics
    assert run.scores.dtypes.to_dict() == {"video": "string", "frame": "int64", "score": "float32",
                                           "label": "int8", "group": "string"}
    assert pd.api.types.is_integer_dtype(run.history.epoch) and pd.api.types.is_float_dtype(run.history.train_loss)
    t = run.metric_table
    assert t.set_index("metric").loc["frame_auc", "lo"] == run.metrics["frame_auc_lo"]
    assert t.set_index("metric").loc["alarm/false_per_hour", "better"] == "lower"
    for fig in (run.timeline(), run.roc(), run.det()):
        assert isinstance(fig, matplotlib.figure.Figure) and fig.axes[0].has_data()
    card = run._repr_html_()
    assert "frame_auc" in card and "selected epoch" in card and "operating point" in card
    with pytest.raises(WsadError, match="not a finished run's folder"):
        load_run(work)


def test_load_run_by_mlflow_run_id(study, monkeypatch):
    s, _, work = study
    run = s.load(variant="head=gated_attention", seed=1)
    monkeypatch.setenv("MLFLOW_TRACKING_URI", f"sqlite:///{work}/mlruns.db")
    again = load_run(run.summary["run_id"])
    assert again.folder == run.folder and again.run_id == run.summary["run_id"]


def test_timeline_browser_shows_the_chosen_video(study):
    from wsad.evaluate.alarms import AlarmRules, alarm_runs
    from wsad.study.widgets import TimelineBrowser

    s, _, _ = study
    browser = TimelineBrowser(s)
    assert list(browser.runs) == ["head=mlp", "head=gated_attention"]
    store = s.load().store
    m = store.manifest[store.manifest.split == "test"]
    camera = sorted(m.group.unique())[-1]
    browser.camera.value = camera                            # the control moves ...
    assert list(browser.video.options) == sorted(m[m.group == camera].video)   # ... the videos follow
    video = browser.video.options[-1]
    browser.video.value = video
    assert browser.shown["video"] == video
    for name, run in browser.runs.items():                   # each trace is that run's exported scores
        table = pd.read_parquet(run.folder / "scores" / "test_scores.parquet")
        expect = table[table.video == video].sort_values("frame").score.to_numpy()
        assert np.array_equal(browser.shown["traces"][name], expect)
        alarms = alarm_runs(expect >= run.metrics["alarm/threshold"], AlarmRules())
        assert np.array_equal(browser.shown["alarms"][name], alarms)


def test_operating_point_explorer_recomputes_as_the_budget_moves(study):
    from wsad.evaluate.alarms import AlarmRules, alarm_runs, alarms_per_hour, budget_threshold
    from wsad.study.widgets import OperatingPointExplorer

    s, _, _ = study
    run = s.load(variant="head=mlp", seed=1)
    explorer = OperatingPointExplorer(run)
    assert explorer.shown["alarm/threshold"] == run.metrics["alarm/threshold"]   # starts at the run's budget
    held = pd.read_parquet(run.folder / "scores" / "heldout_scores.parquet")
    normal = [g.sort_values("frame").score.to_numpy() for _, g in held.groupby("video")
              if g.label.max() == 0]
    fps = run.store.fps
    for budget in (10.0, 100.0):
        explorer.budget.value = budget
        threshold = budget_threshold(normal, fps, budget, AlarmRules())   # independently, by definition:
        assert explorer.shown["alarm/threshold"] == threshold
        assert alarms_per_hour(normal, threshold, fps) <= budget
        test = pd.read_parquet(run.folder / "scores" / "test_scores.parquet")
        per_video = [g.sort_values("frame") for _, g in test.groupby("video")]
        hours = sum(len(g) for g in per_video) / fps / 3600
        false = 0
        for g in per_video:   # an alarm overlapping no event: a false alarm
            lab = g.label.to_numpy()
            for a, b in alarm_runs(g.score.to_numpy() >= threshold):
                false += int(not (lab[a:b] > 0).any())
        assert explorer.shown["alarm/false_per_hour"] == pytest.approx(false / hours)
    assert explorer.shown["budget"] == 100.0 and len(explorer.shown["cameras"]) == len(test.group.unique())


def test_study_file_through_the_command_and_a_local_scheduler(small_store, tmp_path, monkeypatch, capsys):
    study_file = tmp_path / "bays.yaml"
    study_file.write_text(f"stores: [{small_store}]\nbase: {{recipe: topk, trainer.epochs: 1, trainer.bootstrap: 0,"
                          f" trainer.members: 1, tracking.enabled: false}}\nvariants: {{head: [mlp]}}\nseeds: 2\n"
                          "launcher: {name: local, timeout_min: 10}\n")
    code = "import sys; from wsad.cli.study import main; sys.argv=['wsad-study']+sys.argv[1:]; main()"
    res = subprocess.run([sys.executable, "-c", code, str(study_file)], capture_output=True, text=True,
                         timeout=600, cwd=tmp_path)
    assert res.returncode == 0, res.stderr[-3000:]
    assert "2 of 2 runs done" in res.stdout and (tmp_path / "bays" / "report.md").is_file()
    assert list((tmp_path / "bays" / "submitit").glob("*/*_result.pkl"))   # scheduler jobs ran
    # the same command in this process (what its console script calls), for the plan and a bad file
    from wsad.cli.study import PROG, _main
    from wsad.errors import guarded

    monkeypatch.chdir(tmp_path)
    assert guarded(lambda: _main([str(study_file), "--plan"]), PROG) == 0
    assert "2 done" in capsys.readouterr().out
    study_file.write_text("stores: [nowhere]\n")
    with pytest.raises(SystemExit) as stop:
        guarded(lambda: _main([str(study_file)]), PROG)
    assert stop.value.code == 2
    err = capsys.readouterr().err
    assert "is not a feature store" in err and "Traceback" not in err and len(err.strip().splitlines()) == 1


def test_two_level_interval_over_cameras_and_seeds(study):
    """The report's interval that also resamples the test cameras: built here by hand from each
    run's exported frame scores with scikit-learn's AUC on the same camera draws and seed draws."""
    from sklearn.metrics import roc_auc_score

    from wsad.evaluate import bootstrap_indices
    from wsad.report.two_level import two_level_table

    s, _, _ = study
    rep = s.report().reports[next(iter(s.stores))]
    folders = {v: dict(zip(sub.seed, sub.folder)) for v, sub in rep.runs.groupby("variant", sort=False)}
    got = two_level_table(folders, rep.baseline, n=60, seed=3).set_index("variant")
    aucs = {}
    for v, runs in folders.items():
        for seed, folder in runs.items():
            t = pd.read_parquet(f"{folder}/scores/test_scores.parquet")
            t = t[t.label >= 0]
            cams = sorted(t.group.unique())
            draws = bootstrap_indices(len(cams), 60, 3)
            per_cam = {c: t[t.group == c] for c in cams}
            aucs[(v, seed)] = np.array([roc_auc_score(pd.concat([per_cam[cams[c]] for c in row]).label,
                                                      pd.concat([per_cam[cams[c]] for c in row]).score)
                                        for row in draws])
    rng = np.random.default_rng(4)
    for v, runs in folders.items():
        seeds = sorted(runs)
        mine = np.stack([aucs[(v, x)] for x in seeds])
        draw = rng.integers(0, len(seeds), size=(60, len(seeds)))
        means = mine[draw, np.arange(60)[:, None]].mean(axis=1)
        assert got.loc[v, "two_level_lo"] == pytest.approx(np.quantile(means, 0.025))
        assert got.loc[v, "two_level_hi"] == pytest.approx(np.quantile(means, 0.975))
        if v != rep.baseline:
            diffs = np.stack([aucs[(v, x)] - aucs[(rep.baseline, x)] for x in seeds])
            pick = rng.integers(0, len(seeds), size=(60, len(seeds)))
            d = diffs[pick, np.arange(60)[:, None]].mean(axis=1)
            assert got.loc[v, "diff_two_level_lo"] == pytest.approx(np.quantile(d, 0.025))
    seed_only = rep.table[(rep.table.metric == "frame_auc") & (rep.table.variant == rep.baseline)].iloc[0]
    assert got.loc[rep.baseline, "two_level_hi"] - got.loc[rep.baseline, "two_level_lo"] > 0
    assert "Δ [95% CI, cameras and seeds]" in s.report()._repr_html_() and seed_only.n == 2


def test_reports_show_the_bag_embedding_baseline(study, small_store):
    # Reference: the ten-line baseline written here with scikit-learn (common practice: each video's
    # segment mean, max and min concatenated, standardised, logistic regression C = 0.1).
    from sklearn.linear_model import LogisticRegression
    from sklearn.metrics import roc_auc_score
    from sklearn.pipeline import make_pipeline
    from sklearn.preprocessing import StandardScaler

    from wsad.store import FeatureStore

    s, _, _ = study
    store = FeatureStore(small_store)

    def emb(v):
        x = store.views(v).mean(axis=0).astype(np.float64)
        return np.concatenate([x.mean(0), x.max(0), x.min(0)])

    train, test = store.videos("train"), store.videos("test")
    clf = make_pipeline(StandardScaler(), LogisticRegression(C=0.1, max_iter=5000))
    clf.fit([emb(v) for v in train], [store.label(v) for v in train])
    ref = roc_auc_score([store.label(v) for v in test], clf.decision_function([emb(v) for v in test]))
    report = s.report()
    assert report.baselines["baseline video_auc"].iloc[0] == pytest.approx(ref)
    assert f"reaches video_auc {ref:.3f}" in report.to_markdown() and "bag-embedding baseline" in report._repr_html_()
