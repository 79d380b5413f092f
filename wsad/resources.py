"""Where the shipped configuration and scenario recipes are.

The repository keeps them at its top level (``conf/``, ``synthetic/``); the
build maps them into the package as ``wsad.conf`` and ``wsad.scenarios``, so
a wheel carries them and they are found the same way from a checkout, an
editable install or a plain install, whatever the working folder.
"""
from __future__ import annotations

from importlib.resources import files
from pathlib import Path


def _package_dir(name: str) -> Path:
    return Path(str(files(name)))


#: Hydra's primary config folder (``conf/`` in the repository).
CONF_DIR = _package_dir("wsad.conf")

#: Scenario recipes, one YAML each (``synthetic/`` in the repository).
SCENARIO_DIR = _package_dir("wsad.scenarios")


def source_checkout() -> Path | None:
    """The git checkout wsad runs from, when it runs from one (editable install)."""
    root = Path(__file__).resolve().parent.parent
    return root if (root / ".git").exists() and (root / "pyproject.toml").is_file() else None
