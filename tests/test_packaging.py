"""The package as a user installs it: a wheel built from the repository, installed
into a fresh environment outside the checkout, runs every command from any folder."""
from __future__ import annotations

import os
import shutil
import subprocess
import sys
import sysconfig
from pathlib import Path

import pytest
import tomllib
from conftest import REPO

SMALL = ["videos_per_camera.train=4", "videos_per_camera.test=4", "length.mean=40", "length.max=120"]


def test_package_list_matches_the_folders():
    # pyproject lists the packages (two of them mapped from the top-level conf/ and synthetic/);
    # a new folder of wsad/ that is not listed would be missing from the wheel.
    listed = set(tomllib.loads((REPO / "pyproject.toml").read_text())["tool"]["setuptools"]["packages"])
    found = {".".join(p.parent.relative_to(REPO).parts) for top in ("wsad", "hydra_plugins")
             for p in (REPO / top).rglob("__init__.py")}
    assert listed == found | {"wsad.conf", "wsad.scenarios"}


@pytest.fixture(scope="module")
def installed(tmp_path_factory) -> Path:
    """A venv holding only the built wheel (no dependencies: those come from the project's
    environment through a .pth line), so nothing of the checkout is importable."""
    tmp = tmp_path_factory.mktemp("wheel")
    src = tmp / "src"
    src.mkdir()
    for name in ("pyproject.toml", "README.md"):
        shutil.copy(REPO / name, src / name)
    for name in ("wsad", "conf", "synthetic", "hydra_plugins"):
        shutil.copytree(REPO / name, src / name, ignore=shutil.ignore_patterns("__pycache__"))
    build = subprocess.run([sys.executable, "-m", "build", "--wheel", "--outdir", str(tmp / "dist"), str(src)],
                           capture_output=True, text=True, timeout=600)
    assert build.returncode == 0, build.stdout[-2000:] + build.stderr[-2000:]
    wheel = next((tmp / "dist").glob("wsad-*.whl"))
    venv = tmp / "venv"
    subprocess.run([sys.executable, "-m", "venv", "--without-pip", str(venv)], check=True, timeout=120)
    purelib = "import sysconfig; print(sysconfig.get_paths()['purelib'])"
    site = Path(subprocess.run([str(venv / "bin" / "python"), "-c", purelib],
                               capture_output=True, text=True, check=True).stdout.strip())
    (site / "project_env.pth").write_text(sysconfig.get_paths()["purelib"] + "\n")
    inst = subprocess.run([sys.executable, "-m", "pip", "--python", str(venv / "bin" / "python"), "install",
                           "--quiet", "--no-deps", str(wheel)], capture_output=True, text=True, timeout=300)
    assert inst.returncode == 0, inst.stderr[-2000:]
    return venv


def _run(venv: Path, cwd: Path, *cmd: str) -> subprocess.CompletedProcess:
    env = {k: v for k, v in os.environ.items() if k not in ("PYTHONPATH", "VIRTUAL_ENV")}
    env["PATH"] = f"{venv / 'bin'}:{env.get('PATH', '')}"
    return subprocess.run([str(venv / "bin" / cmd[0]), *cmd[1:]], cwd=cwd, env=env, capture_output=True,
                          text=True, timeout=600)


def test_wheel_commands_work_from_any_folder(installed, tmp_path):
    where = _run(installed, tmp_path, "python", "-c", "import wsad, wsad.resources as r; "
                 "print(wsad.__file__); print(r.CONF_DIR); print(r.SCENARIO_DIR)")
    assert where.returncode == 0, where.stderr
    for line in where.stdout.split():
        assert Path(line).is_relative_to(installed) and Path(line).exists(), where.stdout
    assert (Path(where.stdout.split()[0]).parent / "py.typed").is_file()
    res = _run(installed, tmp_path, "wsad-synth", "scenario=warehouse", "out=store", *SMALL, "quiet=true")
    assert res.returncode == 0, res.stderr[-2000:]
    res = _run(installed, tmp_path, "wsad-check", "store")
    assert res.returncode == 0 and "is clean" in res.stdout, res.stdout + res.stderr
    res = _run(installed, tmp_path, "wsad-train", "data.root=store", "recipe=mil_ranking", "trainer.epochs=2",
               "trainer.progress=false", "trainer.bootstrap=0", "hydra.run.dir=run")
    assert res.returncode == 0, res.stderr[-3000:]
    assert "frame_auc" in res.stdout and (tmp_path / "mlruns.db").is_file()
    assert (tmp_path / "run" / "model" / "checkpoint.pt").is_file()
    res = _run(installed, tmp_path, "wsad-score", "checkpoint=run/model/checkpoint.pt", "data.root=store",
               "out=scores.parquet")
    assert res.returncode == 0 and (tmp_path / "scores.parquet").is_file(), res.stderr
    res = _run(installed, tmp_path, "wsad-evaluate", "run/scores/test_scores.parquet", "--store", "store",
               "--heldout", "run/scores/heldout_scores.parquet", "--out", "evaluated", "--no-plots")
    assert res.returncode == 0 and (tmp_path / "evaluated" / "summary.json").is_file(), res.stderr[-2000:]
    res = _run(installed, tmp_path, "wsad-report", "--tracking-uri", "sqlite:///mlruns.db", "--experiment", "wsad",
               "--out", "report", "--no-plots")
    assert res.returncode == 0 and (tmp_path / "report" / "report.md").is_file(), res.stderr[-2000:]
    res = _run(installed, tmp_path, "wsad-train", "data.root=store", "head=transformer")
    assert res.returncode == 2 and "gated_attention" in res.stderr and "Traceback" not in res.stderr
