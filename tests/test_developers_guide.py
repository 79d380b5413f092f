"""The worked examples in DEVELOPERS.md run as written: each Python block becomes
the module its first comment names, and training picks it up by override."""
from __future__ import annotations

import re
import sys
import types

import pytest
from conftest import REPO

from wsad.config import compose_config
from wsad.train import train

GUIDE = (REPO / "DEVELOPERS.md").read_text()
BLOCKS = re.findall(r"```python\n# (wsad/\S+)\.py\n(.*?)```", GUIDE, re.S)
YAMLS = re.findall(r"```yaml\n# (conf/(?:bags|head)/\S+\.yaml)\n(.*?)```", GUIDE, re.S)


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


def test_examples_train(small_store, tmp_path):
    # the guide's YAML files, in a config folder added to Hydra's search path
    for path, text in YAMLS:
        f = tmp_path / "extra" / path.removeprefix("conf/")
        f.parent.mkdir(parents=True, exist_ok=True)
        f.write_text(text)
    assert len(YAMLS) == 2
    cfg = compose_config([
        f"hydra.searchpath=[file://{tmp_path / 'extra'}]",
        f"data.root={small_store}", "recipe=topk", "trainer.epochs=1", "trainer.progress=false",
        "tracking.enabled=false", "trainer.bootstrap=0", f"trainer.out_dir={tmp_path}",
        "bags=truncated", "bags.max_len=20", "head=linear",
        "+terms.margin_gap._target_=wsad.terms.margin_gap.MarginGap", "+objective.margin_gap=0.1"])
    assert cfg.bags._target_.endswith("Truncated") and cfg.head._target_.endswith("LinearHead")
    train(cfg)
    import pandas as pd

    hist = pd.read_csv(tmp_path / "scores" / "history.csv")
    assert "term/margin_gap" in hist.columns
