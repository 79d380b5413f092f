"""The worked examples in DEVELOPERS.md run as written: each Python block becomes
the module its first comment names, each YAML block the file it names, in a
config folder on Hydra's search path, and training picks them up by override."""
from __future__ import annotations

import re
import sys
import types

import pandas as pd
import pytest
from conftest import REPO

from wsad.config import compose_config
from wsad.evaluate import catalogue
from wsad.train import train

GUIDE = (REPO / "DEVELOPERS.md").read_text()
BLOCKS = re.findall(r"```python\n# (wsad/\S+)\.py\n(.*?)```", GUIDE, re.S)
YAMLS = re.findall(r"```yaml\n# (conf/(?:bags|head|terms)/\S+\.yaml)\n(.*?)```", GUIDE, re.S)


@pytest.fixture(scope="module", autouse=True)
def guide_modules():
    names = []
    for path, code in BLOCKS:
        name = path.replace("/", ".")
        mod = types.ModuleType(name)
        exec(compile(code, f"DEVELOPERS.md:{path}", "exec"), mod.__dict__)
        sys.modules[name] = mod
        names.append(name)
    yield
    for n in names:
        sys.modules.pop(n, None)
    catalogue.remove("peak_in_event")   # the metric example registered itself


def test_guide_has_the_five_examples():
    assert [p for p, _ in BLOCKS] == ["wsad/bags/truncated", "wsad/heads/linear", "wsad/terms/margin_gap",
                                      "wsad/evaluate/peak_in_event", "wsad/publish/ledger"]
    assert [p for p, _ in YAMLS] == ["conf/bags/truncated.yaml", "conf/head/linear.yaml",
                                     "conf/terms/margin_gap.yaml"]


def test_examples_train(small_store, tmp_path):
    for path, text in YAMLS:
        f = tmp_path / "extra" / path.removeprefix("conf/")
        f.parent.mkdir(parents=True, exist_ok=True)
        f.write_text(text)
    cfg = compose_config([
        f"hydra.searchpath=[file://{tmp_path / 'extra'}]",
        f"data.root={small_store}", "trainer.members=1", "recipe=topk", "trainer.epochs=1", "trainer.progress=false",
        "tracking.enabled=false", "trainer.bootstrap=0", f"trainer.out_dir={tmp_path}",
        "bags=truncated", "bags.max_len=20", "head=linear", "objective.margin_gap=0.1"])
    assert cfg.bags._target_.endswith("Truncated") and cfg.head._target_.endswith("LinearHead")
    assert cfg.ablation.on_weight.margin_gap == 0.1
    train(cfg)
    hist = pd.read_csv(tmp_path / "scores" / "history.csv")
    assert hist["term/margin_gap"].iloc[0] > 0


def test_metric_example_is_logged_and_matches_a_hand_computation(small_store, tmp_path):
    """One catalogue entry and its function: the run logs the metric, its summary holds it, and
    its value is the share computed here by hand from the exported frame scores."""
    import json

    ledger = sys.modules["wsad.publish.ledger"].Ledger(tmp_path / "runs.csv")
    cfg = compose_config([f"data.root={small_store}", "trainer.members=1",
                          "recipe=topk", "trainer.epochs=2", "trainer.progress=false",
                          "tracking.enabled=false", "trainer.bootstrap=0", f"trainer.out_dir={tmp_path}/run"])
    res = train(cfg, sinks=[ledger])
    frames = pd.read_parquet(tmp_path / "run" / "scores" / "test_scores.parquet")
    anomalous = frames.groupby("video").filter(lambda g: g.label.max() == 1)
    by_hand = anomalous.groupby("video").apply(lambda g: g.label.iloc[g.score.to_numpy().argmax()]).mean()
    assert res.metrics["peak_in_event"] == pytest.approx(by_hand) and 0 < by_hand < 1
    summary = json.loads((tmp_path / "run" / "summary.json").read_text())
    assert summary["metrics"]["peak_in_event"]["value"] == res.metrics["peak_in_event"]
    assert "peak_in_event" in pd.read_csv(tmp_path / "run" / "scores" / "history.csv").columns
    assert "peak_in_event" in catalogue.reported()
    # the sink example: one ledger row per finished run
    train(cfg, sinks=[ledger])
    rows = pd.read_csv(tmp_path / "runs.csv")
    assert len(rows) == 2 and rows.frame_auc.iloc[0] == res.metrics["frame_auc"]
