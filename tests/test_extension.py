"""Extending wsad without editing it: a term (one module, one YAML) and a recipe in a
researcher's own folders, found through Hydra's search path."""
from __future__ import annotations

import os
import subprocess
import sys
import textwrap
from pathlib import Path

import pandas as pd
import pytest
from conftest import REPO

TERM = '''
import torch
from wsad.pooling import masked_max
from wsad.terms import Term


class TopGap(Term):
    """L = max(0, m - (mean top score of anomalous bags - mean top score of normal bags))."""

    def __init__(self, margin: float = 0.5):
        self.margin = float(margin)

    def __call__(self, inp):
        top = masked_max(inp.scores, inp.mask)
        return torch.relu(self.margin - (top[inp.y > 0.5].mean() - top[inp.y <= 0.5].mean()))
'''


@pytest.fixture
def own_repo(tmp_path) -> Path:
    """A researcher's repository: a package with one term, a config folder with its YAML and a recipe."""
    (tmp_path / "lab_terms").mkdir()
    (tmp_path / "lab_terms" / "__init__.py").write_text("")
    (tmp_path / "lab_terms" / "top_gap.py").write_text(TERM)
    (tmp_path / "lab_conf" / "terms").mkdir(parents=True)
    (tmp_path / "lab_conf" / "terms" / "top_gap.yaml").write_text(textwrap.dedent("""\
        _target_: lab_terms.top_gap.TopGap
        margin: 0.5
        ablation_weight: 0.3
        """))
    (tmp_path / "lab_conf" / "recipe").mkdir()
    (tmp_path / "lab_conf" / "recipe" / "topk_gap.yaml").write_text(textwrap.dedent("""\
        # @package _global_
        defaults:
          - topk
        recipe_name: topk_gap
        objective: {bag_bce: 1.0, top_gap: 0.2}
        """))
    return tmp_path


def _train(cwd: Path, *args: str) -> subprocess.CompletedProcess:
    env = {**os.environ, "PYTHONPATH": str(cwd)}
    code = "import sys; from wsad.cli.train import main; sys.argv = ['wsad-train'] + sys.argv[1:]; main()"
    return subprocess.run([sys.executable, "-c", code, *args], cwd=cwd, env=env, capture_output=True,
                          text=True, timeout=600)


def test_own_term_and_recipe_train_by_override(own_repo, small_store):
    search = f"hydra.searchpath=[file://{own_repo / 'lab_conf'}]"
    common = [f"data.root={small_store}", "trainer.members=1", search, "trainer.epochs=1", "trainer.progress=false",
              "trainer.bootstrap=0", "tracking.enabled=false"]
    res = _train(own_repo, *common, "recipe=topk", "objective.top_gap=0.1", "hydra.run.dir=a")
    assert res.returncode == 0, res.stderr[-3000:]
    hist = pd.read_csv(own_repo / "a" / "scores" / "history.csv")
    assert hist["term/top_gap"].iloc[0] > 0
    res = _train(own_repo, *common, "recipe=topk_gap", "hydra.run.dir=b")
    assert res.returncode == 0, res.stderr[-3000:]
    cfg = (own_repo / "b" / "config" / "resolved.yaml").read_text()
    assert "top_gap: 0.2" in cfg and "recipe_name: topk_gap" in cfg
    # the lists of known names come from the same folders: a typo names the user's term
    res = _train(own_repo, *common, "objective.top_gapp=0.1")
    assert res.returncode == 2 and "top_gap" in res.stderr and "Traceback" not in res.stderr
    # and without the search path the term is unknown, in one line
    res = _train(own_repo, f"data.root={small_store}", "trainer.members=1", "objective.top_gap=0.1")
    assert res.returncode == 2 and "is not a term" in res.stderr


def test_own_term_joins_ablation_toggles(own_repo, small_store):
    from wsad.config import compose_config
    from wsad.train import apply_ablation

    cfg = compose_config([f"data.root={small_store}", "trainer.members=1", "recipe=windows", "ablation.toggle=top_gap",
                          f"hydra.searchpath=[file://{own_repo / 'lab_conf'}]"])
    apply_ablation(cfg)
    assert cfg.objective.top_gap == 0.3 and cfg.terms.top_gap.margin == 0.5


def test_adding_a_term_is_one_module_and_one_yaml():
    # Every list of terms derives from conf/terms/: the package names no term anywhere else.
    terms = sorted(p.stem for p in (REPO / "conf" / "terms").glob("*.yaml"))
    assert terms == sorted(p.stem for p in (REPO / "wsad" / "terms").glob("*.py")
                           if p.stem not in ("__init__", "base"))
    for path in list((REPO / "wsad").rglob("*.py")) + list((REPO / "conf").rglob("*.yaml")):
        if path.parent.name in ("terms", "recipe", "sweep"):
            continue  # a term's own module and YAML; recipes and sweep presets choose terms by name
        text = path.read_text()
        for name in terms:
            assert f"{name}:" not in text and f'"{name}"' not in text, (path, name)
