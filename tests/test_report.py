"""Report statistics against SciPy, and grouping by exactly the varying params."""
from __future__ import annotations

import math

import numpy as np
import pandas as pd
import pytest
from scipy import stats

from wsad.errors import WsadError
from wsad.report import build_report, markdown_table, paired_tests, t_interval, varying_params, write_report


def test_t_interval_matches_scipy():
    # Reference: scipy.stats.t.interval(0.95, n-1, loc=mean, scale=sem).
    x = [0.812, 0.797, 0.825, 0.804, 0.79]
    mean, sd, lo, hi, n = t_interval(x)
    ref = stats.t.interval(0.95, len(x) - 1, loc=np.mean(x), scale=stats.sem(x))
    assert (lo, hi) == pytest.approx(ref, abs=1e-12)
    assert sd == pytest.approx(np.std(x, ddof=1)) and n == 5 and mean == pytest.approx(np.mean(x))
    assert math.isnan(t_interval([0.5])[2])


def test_paired_tests_match_scipy():
    # Reference: scipy.stats.wilcoxon and scipy.stats.ttest_rel on the same pairs.
    a = np.array([0.80, 0.78, 0.83, 0.81, 0.79, 0.82, 0.84])
    b = np.array([0.77, 0.78, 0.80, 0.76, 0.80, 0.79, 0.80])
    r = paired_tests(a, b)
    assert r["p_wilcoxon"] == pytest.approx(stats.wilcoxon(a, b).pvalue, abs=1e-12)
    assert r["p_t"] == pytest.approx(stats.ttest_rel(a, b).pvalue, abs=1e-12)
    lo, hi = stats.t.interval(0.95, 6, loc=np.mean(a - b), scale=stats.sem(a - b))
    assert (r["diff_lo"], r["diff_hi"]) == pytest.approx((lo, hi), abs=1e-12)
    assert r["diff"] == pytest.approx(np.mean(a - b))
    # three seeds: the exact two-sided Wilcoxon p can never go below 2 / 2^3 = 0.25
    assert paired_tests([0.9, 0.91, 0.92], [0.5, 0.5, 0.5])["p_wilcoxon"] == pytest.approx(0.25)


def _runs(seed_effect=None):
    rows = []
    rng = np.random.default_rng(0)
    for variant, shift in (("none", 0.0), ("smoothness", 0.05), ("sparsity", 0.0)):
        for seed in range(5):
            rows.append({"run_id": f"{variant}{seed}", "run_name": "x",
                         "params.seed": str(seed), "params.ablation.toggle": variant,
                         "params.objective.smoothness": "0.0" if variant == "smoothness" else "0.001",
                         "params.head.hidden": "[512, 32]", "params.trainer.out_dir": f"/o/{variant}{seed}",
                         "params.data.fingerprint": "abc",
                         "metrics.frame_auc": 0.7 + shift + 0.01 * seed + rng.normal(0, 0.002),
                         "metrics.video_auc": 0.6 + 0.01 * seed})
    return pd.DataFrame(rows)


def test_grouping_uses_exactly_the_varying_params():
    runs = _runs()
    assert varying_params(runs) == ["ablation.toggle", "objective.smoothness"]
    rep = build_report(runs, metrics=("frame_auc", "video_auc"))
    assert rep.baseline == "ablation.toggle=none"
    t = rep.table[rep.table.metric == "frame_auc"].set_index("variant")
    assert set(t.index) == {"ablation.toggle=none", "ablation.toggle=smoothness", "ablation.toggle=sparsity"}
    assert (t["n"] == 5).all()
    assert t.loc["ablation.toggle=smoothness", "significant"]
    assert not t.loc["ablation.toggle=sparsity", "significant"]
    md = markdown_table(rep, "frame_auc")
    bold_rows = [line for line in md.splitlines() if "**" in line]
    assert len(bold_rows) == 1 and "smoothness" in bold_rows[0]


def test_explicit_by_and_baseline(tmp_path):
    runs = _runs()
    rep = build_report(runs, by=["ablation.toggle"], baseline="ablation.toggle=sparsity",
                       metrics=("frame_auc",))
    assert rep.baseline == "ablation.toggle=sparsity"
    with pytest.raises(WsadError, match="matches 0 variants"):
        build_report(runs, baseline="ablation.toggle=bogus")
    with pytest.raises(WsadError, match="no run has this param"):
        build_report(runs, by=["nonexistent.key"])
    paths = write_report(rep, tmp_path, tracking_uri=None)
    assert (tmp_path / "report.md").read_text().count("ablation.toggle=") >= 3
    csv = pd.read_csv(paths["csv"])
    assert {"variant", "metric", "mean", "lo", "hi", "p_t", "p_wilcoxon"} <= set(csv.columns)
    tex = paths["tex"].read_text()
    assert r"\toprule" in tex and r"\midrule" in tex and r"\bottomrule" in tex
    assert paths["metric_plot"].exists()


def test_a_seed_run_twice_counts_once_and_nan_pairs_are_left_out(tmp_path):
    # Found by running a sweep again: the report must neither crash nor count a seed twice.
    runs = _runs()
    again = runs[(runs["params.ablation.toggle"] == "smoothness") & (runs["params.seed"] == "2")].copy()
    runs["start_time"] = range(len(runs))
    again["run_id"], again["start_time"], again["metrics.frame_auc"] = "again", 10 ** 6, 0.123
    rep = build_report(pd.concat([runs, again], ignore_index=True), metrics=("frame_auc",))
    t = rep.table.set_index("variant")
    assert rep.duplicates == 1 and t.loc["ablation.toggle=smoothness", "n"] == 5
    kept = rep.runs[(rep.runs.variant == "ablation.toggle=smoothness") & (rep.runs.seed == "2")]
    assert list(kept.run_id) == ["again"]                       # the latest run of the seed
    write_report(rep, tmp_path, plots=False)
    assert "repeated a seed" in (tmp_path / "report.md").read_text()
    # a NaN in one seed's metric drops that pair only (reference: SciPy on the remaining pairs)
    a = np.array([0.80, 0.78, np.nan, 0.81, 0.79, 0.82])
    b = np.array([0.77, 0.78, 0.80, 0.76, 0.80, 0.79])
    r = paired_tests(a, b)
    keep = ~np.isnan(a)
    assert r["n_pairs"] == 5
    assert r["p_t"] == pytest.approx(stats.ttest_rel(a[keep], b[keep]).pvalue, abs=1e-12)
