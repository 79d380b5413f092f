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


def _exact_wilcoxon(d) -> float:
    # The exact two-sided signed-rank p by enumeration (Wilcoxon 1945): under the null every
    # one of the 2^n sign patterns of the ranks of |d| is equally likely;
    # p = min(1, 2 min(P(W+ <= w), P(W+ >= w))).
    import itertools

    ranks = stats.rankdata(np.abs(d))
    w = ranks[d > 0].sum()
    null = np.array([sum(r for r, s in zip(ranks, signs) if s) for signs in itertools.product([0, 1], repeat=len(d))])
    return min(1.0, 2 * min((null <= w).mean(), (null >= w).mean()))


def test_paired_tests_match_hand_computations():
    # References: the paired t statistic written out, t = mean(d) / (sd(d) / sqrt(n)) with
    # p = 2 P(T_{n-1} > |t|), and the exact signed-rank p by enumeration of the sign flips.
    a = np.array([0.80, 0.78, 0.83, 0.81, 0.79, 0.82, 0.84])
    b = np.array([0.77, 0.785, 0.80, 0.76, 0.80, 0.79, 0.80])
    d = a - b
    r = paired_tests(a, b)
    t = d.mean() / (d.std(ddof=1) / np.sqrt(len(d)))
    assert r["p_t"] == pytest.approx(2 * stats.t.sf(abs(t), len(d) - 1), abs=1e-12)
    assert r["p_wilcoxon"] == pytest.approx(_exact_wilcoxon(d), abs=1e-12)
    half = stats.t.ppf(0.975, len(d) - 1) * d.std(ddof=1) / np.sqrt(len(d))
    assert (r["diff_lo"], r["diff_hi"]) == pytest.approx((d.mean() - half, d.mean() + half), abs=1e-12)
    assert r["diff"] == pytest.approx(d.mean()) and r["diff_sd"] == pytest.approx(d.std(ddof=1))
    # three seeds all one way: the exact two-sided p is 2 / 2^3 = 0.25, its floor (only the two
    # all-same-sign patterns of 2^n are as extreme; Wilcoxon 1945)
    d3 = np.array([0.4, 0.41, 0.42])
    assert paired_tests(d3 + 0.5, np.full(3, 0.5))["p_wilcoxon"] == pytest.approx(_exact_wilcoxon(d3)) == 0.25


def test_holm_matches_statsmodels():
    # Reference: statsmodels.stats.multitest.multipletests(method="holm") (Holm 1979).
    from statsmodels.stats.multitest import multipletests

    from wsad.report.stats import holm

    p = [0.01, 0.04, 0.03, 0.005, 0.2, 0.5]
    np.testing.assert_allclose(holm(p), multipletests(p, method="holm")[1], atol=1e-12)
    got = holm([0.02, float("nan"), 0.01])
    assert math.isnan(got[1]) and got[0] == pytest.approx(0.02) and got[2] == pytest.approx(0.02)


@pytest.mark.parametrize("diff,sd", [(0.01, 0.012), (0.02, 0.01), (0.005, 0.02), (0.03, 0.01)])
def test_seed_plan_matches_statsmodels(diff, sd):
    # Reference: statsmodels.stats.power.TTestPower (one-sample / paired t, two-sided).
    from statsmodels.stats.power import TTestPower

    from wsad.report.planning import paired_power, seeds_needed

    ref = TTestPower().solve_power(effect_size=diff / sd, alpha=0.05, power=0.8, alternative="two-sided")
    n = seeds_needed(diff, sd)
    assert abs(n - math.ceil(ref)) <= 1, (n, ref)
    assert paired_power(n, diff / sd) >= 0.8 > paired_power(n - 1, diff / sd) if n > 2 else True
    assert paired_power(9, diff / sd) == pytest.approx(
        TTestPower().power(effect_size=diff / sd, nobs=9, alpha=0.05, alternative="two-sided"), abs=1e-6)


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
    runs_nan = pd.concat([runs, again], ignore_index=True)
    runs_nan.loc[runs_nan.run_id == "sparsity3", "metrics.frame_auc"] = np.nan
    rep = build_report(runs_nan, metrics=("frame_auc",))
    t = rep.table.set_index("variant")
    assert t.loc["ablation.toggle=sparsity", "n"] == 4 and t.loc["ablation.toggle=sparsity", "n_pairs"] == 4
    assert t["p_t"].drop("ablation.toggle=none").notna().all() and "p_holm" in t.columns
    paths = write_report(rep, tmp_path, plots=False, plan=0.01)
    text = (tmp_path / "report.md").read_text()
    assert "repeated a seed" in text and "p (Holm)" in text and "Seed plan" in text
    assert set(pd.read_csv(paths["plan"]).variant) == {"ablation.toggle=smoothness", "ablation.toggle=sparsity"}
    # a NaN in one seed's metric drops that pair only (reference: SciPy on the remaining pairs)
    a = np.array([0.80, 0.78, np.nan, 0.81, 0.79, 0.82])
    b = np.array([0.77, 0.78, 0.80, 0.76, 0.80, 0.79])
    r = paired_tests(a, b)
    keep = ~np.isnan(a)
    assert r["n_pairs"] == 5
    assert r["p_t"] == pytest.approx(stats.ttest_rel(a[keep], b[keep]).pvalue, abs=1e-12)


def test_a_paired_difference_without_spread_is_not_a_test():
    # Every seed moves by exactly 1/36 (one video of 36 called right more): no spread, so the paired
    # t-test is undefined (SciPy gives NaN for it too), no interval, never bold.
    a = np.array([0.50, 0.55, 0.61, 0.47, 0.52])
    r = paired_tests(a + 1 / 36, a)
    with np.errstate(all="ignore"):
        assert np.isnan(stats.ttest_rel(a + 1 / 36, a).pvalue) or r["zero_spread"]
    assert r["zero_spread"] and math.isnan(r["p_t"]) and math.isnan(r["diff_lo"])
    assert r["diff"] == pytest.approx(1 / 36)
    runs = _runs()
    base = runs[runs["params.ablation.toggle"] == "none"].copy()
    shifted = base.assign(**{"params.ablation.toggle": "sparsity", "run_id": base.run_id + "s",
                             "metrics.frame_auc": base["metrics.frame_auc"] + 1 / 36})
    rep = build_report(pd.concat([base, shifted]), by=["ablation.toggle"], metrics=("frame_auc",))
    row = rep.table.set_index("variant").loc["ablation.toggle=sparsity"]
    assert not row.significant and row.zero_spread
    md = markdown_table(rep, "frame_auc")
    assert "at every seed (no spread: no test)" in md and "**" not in md


def test_only_the_primary_metric_is_marked():
    rep = build_report(_runs(), metrics=("frame_auc", "video_auc"), primary="video_auc")
    t = rep.table.set_index(["metric", "variant"])
    assert not t.loc[("frame_auc", "ablation.toggle=smoothness"), "significant"]     # secondary now
    assert t.loc[("frame_auc", "ablation.toggle=smoothness"), "p_holm"] < 0.05        # its p is still shown
    assert "secondary metric" in markdown_table(rep, "frame_auc")


@pytest.mark.parametrize("n,sd,comparisons", [(5, 0.012, 3), (8, 0.02, 1), (4, 0.01, 5)])
def test_seed_plan_at_holms_level_with_the_pilot_sds_upper_limit(n, sd, comparisons):
    # References: the sd's one-sided 80% upper limit sd sqrt((n-1)/chi2_{0.2}(n-1)) with SciPy's
    # chi2, and statsmodels' TTestPower at alpha / comparisons (Holm's first step).
    from statsmodels.stats.power import TTestPower

    from wsad.report.planning import plan_table, sd_upper_limit

    upper = sd * math.sqrt((n - 1) / stats.chi2.ppf(0.2, n - 1))
    assert sd_upper_limit(sd, n) == pytest.approx(upper)
    table = pd.DataFrame([{"variant": f"v{i}", "metric": "frame_auc", "n_pairs": n, "diff_sd": sd}
                          for i in range(comparisons + 1)])
    plan = plan_table(table, "v0", 0.02, comparisons=comparisons)
    ref = TTestPower().solve_power(effect_size=0.02 / upper, alpha=0.05 / comparisons, power=0.8)
    assert (plan.alpha == 0.05 / comparisons).all()
    assert abs(plan.seeds_needed.iloc[0] - math.ceil(ref)) <= 1
    assert plan.seeds_needed.iloc[0] > plan_table(table, "v0", 0.02, alpha=1.0, comparisons=1).seeds_needed.iloc[0]


def test_aggregates_across_stores_match_rliable():
    # References: rliable's own estimators (Agarwal et al. 2021) for the interquartile mean and the
    # probability of improvement; the stratified bootstrap by its definition (runs resampled within
    # each store, the same draws); performance profiles by rliable's formula, mean(scores > tau).
    from rliable import metrics as rl

    from wsad.report.aggregate import (
        improvement_interval,
        interval,
        iqm,
        performance_profile,
        probability_of_improvement,
        stratified_resamples,
    )

    rng = np.random.default_rng(0)
    x = rng.normal(0.75, 0.03, (5, 4)).round(2)   # 5 seeds x 4 stores, rounded: ties
    y = rng.normal(0.72, 0.03, (5, 4)).round(2)
    assert iqm(x) == pytest.approx(rl.aggregate_iqm(x))
    assert probability_of_improvement(x, y) == pytest.approx(rl.probability_of_improvement(x, y))
    taus = np.linspace(0.6, 0.9, 7)
    np.testing.assert_allclose(performance_profile(x, taus), [np.mean(x > t) for t in taus])
    boot = stratified_resamples({"x": x}, 50, 3)["x"]
    idx = np.random.default_rng(3).integers(0, 5, size=(50, 5, 4))
    np.testing.assert_array_equal(boot, x[idx, np.arange(4)[None, None, :]])
    value, lo, hi = interval({"x": x}, iqm, 500, 1)["x"]
    assert value == pytest.approx(rl.aggregate_iqm(x)) and lo < value < hi
    p, plo, phi = improvement_interval(x, y, 500, 2)
    assert plo <= p <= phi and 0 <= plo and phi <= 1
