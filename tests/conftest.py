"""Shared fixtures: small synthetic stores made once per session."""
from __future__ import annotations

import hashlib
import os
from pathlib import Path

import pytest
import torch

from wsad.synthetic import generate_store, load_scenario

#: The repository (notebooks, DEVELOPERS.md, Makefile); the package itself may be installed elsewhere.
REPO = Path(__file__).resolve().parent.parent

# A small version of the default scenario: seconds to make, still two classes per split.
SMALL = ["videos_per_camera.train=4", "videos_per_camera.test=4", "length.mean=40",
         "length.max=120"]


def make_store(path: Path, scenario: str = "warehouse", overrides: list[str] | None = None) -> Path:
    cfg = load_scenario(scenario, SMALL + list(overrides or []))
    return generate_store(cfg, path, progress=False)


@pytest.fixture(scope="session")
def small_store(tmp_path_factory) -> Path:
    return make_store(tmp_path_factory.mktemp("stores") / "small")


@pytest.fixture(scope="session")
def demo_store(tmp_path_factory) -> Path:
    """The default scenario exactly as the demo makes it."""
    return generate_store(load_scenario("warehouse"), tmp_path_factory.mktemp("stores") / "demo",
                          progress=False)


def tree_hash(root: Path) -> dict[str, str]:
    """Content hash of every file under root (symlinks hashed by target path)."""
    out = {}
    for p in sorted(Path(root).rglob("*")):
        if p.is_symlink():
            out[str(p.relative_to(root))] = "link:" + os.readlink(p)
        elif p.is_file():
            out[str(p.relative_to(root))] = hashlib.sha256(p.read_bytes()).hexdigest()
    return out


class CountTorchCalls(torch.overrides.TorchFunctionMode):
    """Counts torch function calls (a per-bag Python loop would scale them with B)."""

    def __init__(self):
        super().__init__()
        self.calls = 0

    def __torch_function__(self, func, types, args=(), kwargs=None):
        self.calls += 1
        return func(*args, **(kwargs or {}))


#: The files whose tests take longest (measured: `pytest --durations`), first. With two processes
#: (make test: pytest-xdist, a file per process) a long file started last would leave the other
#: process idle at the end; longest first is the classic greedy order for that (Graham 1969).
LONGEST_FIRST = ("test_notebooks.py", "test_reliability.py", "test_extract.py", "test_sweeps.py",
                 "test_open_collections.py", "test_team.py", "test_study.py", "test_packaging.py")


def pytest_collection_modifyitems(items):
    rank = {name: i for i, name in enumerate(LONGEST_FIRST)}
    items.sort(key=lambda item: rank.get(item.path.name, len(rank)))   # stable: the rest keep their order
