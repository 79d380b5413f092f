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


def test_guide_has_the_three_examples():
    assert [p for p, _ in BLOCKS] == ["wsad/bags/truncated", "wsad/heads/linear", "wsad/terms/margin_gap"]
    assert [p for p, _ in YAMLS] == ["conf/bags/truncated.yaml", "conf/head/linear.yaml",
                                     "conf/terms/margin_gap.yaml"]


def test_examples_train(small_store, tmp_path):
    for path, text in YAMLS:
        f = tmp_path / "extra" / path.removeprefix("conf/")
        f.parent.mkdir(parents=True, exist_ok=True)
        f.write_text(text)
    cfg = compose_config([
        f"hydra.searchpath=[file://{tmp_path / 'extra'}]",
        f"data.root={small_store}", "recipe=topk", "trainer.epochs=1", "trainer.progress=false",
        "tracking.enabled=false", "trainer.bootstrap=0", f"trainer.out_dir={tmp_path}",
        "bags=truncated", "bags.max_len=20", "head=linear", "objective.margin_gap=0.1"])
    assert cfg.bags._target_.endswith("Truncated") and cfg.head._target_.endswith("LinearHead")
    assert cfg.ablation.on_weight.margin_gap == 0.1
    train(cfg)
    hist = pd.read_csv(tmp_path / "scores" / "history.csv")
    assert hist["term/margin_gap"].iloc[0] > 0
