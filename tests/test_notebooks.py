"""The notebooks and the documentation site: committed without outputs, each with a cell tagged
``parameters`` (the tests inject small values with papermill, the notebooks carry no test
plumbing), executed top to bottom, and built with the guide into the static site by the same
code as ``make docs`` (strict: a broken link or a failing notebook fails it). Defaults under -m slow."""
from __future__ import annotations

import json
import os
import socket
import subprocess
import sys
import time
import urllib.request
from pathlib import Path

import mlflow
import nbformat
import pytest
from conftest import REPO

sys.path.insert(0, str(REPO / "scripts"))
import build_docs  # noqa: E402

NOTEBOOKS = sorted((REPO / "notebooks").glob("*.ipynb"))


def test_there_are_six_walkthroughs():
    assert [p.stem[:2] for p in NOTEBOOKS] == ["01", "02", "03", "04", "05", "06"]
    assert set(build_docs.SMALL) == {p.stem for p in NOTEBOOKS}


@pytest.mark.parametrize("path", NOTEBOOKS, ids=lambda p: p.stem)
def test_committed_without_outputs_or_test_plumbing(path):
    nb = nbformat.read(path, as_version=4)
    code = [c for c in nb.cells if c.cell_type == "code"]
    for cell in code:
        assert cell.outputs == [] and cell.execution_count is None, f"{path.name} has outputs"
        assert "WSAD_NOTEBOOK" not in cell.source and "SMALL" not in cell.source
    assert "parameters" in code[0].metadata.get("tags", [])     # papermill injects after this cell
    text = "\n".join(c.source for c in nb.cells)
    if path.stem[:2] in ("03", "05", "06"):                      # the responsible-use note
        assert "data-protection law" in text and "human review" in text


@pytest.fixture(scope="module")
def site(tmp_path_factory):
    """The docs tree with its generated pages, every notebook executed (small), the site built."""
    work = tmp_path_factory.mktemp("docs")
    tree = build_docs.tree_of(work)
    executed = build_docs.execute_notebooks(tree / "notebooks", work / "nb", small=True)
    build_docs.build_site(tree, work / "site")
    return work, {k: nbformat.read(v, as_version=4) for k, v in executed.items()}


def _text(nb) -> str:
    out = []
    for c in nb.cells:
        for o in c.get("outputs", []):
            data = o.get("data", {})
            out.append(str(o.get("text", "")) + str(data.get("text/plain", "")) + str(data.get("text/markdown", ""))
                       + str(data.get("text/html", "")))
    return "\n".join(out)


def _images(nb) -> int:
    return sum("image/png" in o.get("data", {}) for c in nb.cells for o in c.get("outputs", []))


def test_the_site_builds_with_every_notebook_executed(site):
    work, books = site
    html = (work / "site" / "index.html").read_text()
    assert "wsad is for ML researchers" in html
    for name in books:
        page = (work / "site" / "notebooks" / name / "index.html").read_text()
        assert "<img" in page or "image/png" in page or "data:image/png" in page, name   # executed, with figures
    metrics = (work / "site" / "reference" / "metrics" / "index.html").read_text()
    assert "frame_auc" in metrics and "alarm/false_per_hour" in metrics   # generated from the catalogue


@pytest.mark.parametrize("name", [p.stem for p in NOTEBOOKS])
def test_notebook_shows_its_results(site, name):
    _, books = site
    nb = books[name]
    assert _images(nb) >= 1, name   # results come as pictures
    text = _text(nb)
    if name.startswith("01"):
        assert "selected epoch" in text and "frame_auc" in text         # the run's card
    if name.startswith("02"):
        assert "p (Holm)" in text and "cameras like these" in text
    if name.startswith("03"):
        assert "holds NaN" in text and "features mean nothing" in text and "store ready in" in text
    if name.startswith("04"):
        assert "p-values are Holm-adjusted over the" in text           # the computed conclusion
        assert "p_improvement" in text                                    # the across-settings aggregate
    if name.startswith("05"):
        assert "at the warehouse-1 threshold" in text and "| warehouse 2 | topk | 5.000 |" in text
    if name.startswith("06"):
        assert "lag-1 autocorrelation" in text and "p (Holm)" in text


def test_running_the_ablation_again_trains_nothing(site):
    """Notebook 02 is a Study, .run(), .report(): executed a second time in the same folder it
    trains nothing and adds no MLflow run."""
    work, _ = site
    uri = f"sqlite:///{work / 'nb' / 'nb_work' / '02' / 'mlruns.db'}"
    client = mlflow.MlflowClient(uri)
    exp = client.get_experiment_by_name("terms_ablation")
    before = {r.info.run_id for r in client.search_runs([exp.experiment_id])}
    assert len(before) == 3 * 2 + 1                               # 3 variants x 2 seeds and the study's parent
    build_docs.execute_notebooks(work / "again", work / "nb", small=True, only=["02_ablation_study"])
    assert {r.info.run_id for r in client.search_runs([exp.experiment_id])} == before


def test_run_notebook_injects_parameters_and_names_a_failing_cell(tmp_path):
    """scripts/run_notebook.py (the README's way to run notebook 06 on a store) against what
    papermill documents: values injected after the cell tagged ``parameters``, typed as YAML."""
    def notebook(name: str, *cells: str) -> Path:
        nb = nbformat.v4.new_notebook()
        nb.cells = [nbformat.v4.new_code_cell(c) for c in cells]
        nb.cells[0].metadata["tags"] = ["parameters"]
        nb.metadata["kernelspec"] = {"name": "python3", "display_name": "Python 3", "language": "python"}
        nbformat.write(nb, tmp_path / name)
        return tmp_path / name

    def run(*args):
        return subprocess.run([sys.executable, str(REPO / "scripts" / "run_notebook.py"), *map(str, args)],
                              cwd=tmp_path, capture_output=True, text=True, timeout=300)

    good = notebook("bay.ipynb", "LOADS = 1\nBAY = 'north'", "print(LOADS * 2, BAY, type(LOADS).__name__)")
    res = run(good, tmp_path / "out.ipynb", "-p", "LOADS", "21", "-p", "BAY", "dock 4")
    assert res.returncode == 0, res.stderr[-2000:]
    assert "42 dock 4 int" in _text(nbformat.read(tmp_path / "out.ipynb", as_version=4))
    bad = notebook("jam.ipynb", "LINE = 3", "raise ValueError(f'conveyor {LINE} jammed')")
    res = run(bad, tmp_path / "jam_out.ipynb", "-p", "LINE", "7")
    # one line of ours, last (the kernel's own start-up notice may precede it); the count is the
    # cell's execution count, the injected parameters cell included
    assert res.returncode == 1 and "cell [3] raised ValueError: conveyor 7 jammed" in res.stderr.splitlines()[-1]
    res = run(tmp_path / "none.ipynb", tmp_path / "x.ipynb")
    assert res.returncode == 2 and res.stderr.strip() == f"run_notebook.py: no notebook at {tmp_path / 'none.ipynb'}"
    before = good.read_bytes()
    res = run(good, good)
    assert res.returncode == 2 and "overwrite" in res.stderr and good.read_bytes() == before


@pytest.mark.slow
@pytest.mark.parametrize("path", NOTEBOOKS, ids=lambda p: p.stem)
def test_notebook_runs_with_defaults(path, tmp_path):
    out = tmp_path / path.name
    build_docs.execute_notebook(path, out, {}, tmp_path)
    assert _images(nbformat.read(out, as_version=4)) >= 1


def _free_port() -> int:
    with socket.socket() as s:
        s.bind(("127.0.0.1", 0))
        return s.getsockname()[1]


def test_jupyter_server_answers_on_loopback(tmp_path):
    port = _free_port()
    exe = Path(sys.executable).with_name("jupyter")
    root = ["--allow-root"] if os.geteuid() == 0 else []
    proc = subprocess.Popen([str(exe), "lab", "--no-browser", "--ip", "127.0.0.1", "--port", str(port), *root,
                             "--IdentityProvider.token=wsadtest", f"--ServerApp.root_dir={REPO / 'notebooks'}"],
                            stdout=subprocess.DEVNULL, stderr=subprocess.DEVNULL, cwd=tmp_path)
    try:
        deadline = time.time() + 90
        while True:
            try:
                with urllib.request.urlopen(f"http://127.0.0.1:{port}/api/kernelspecs?token=wsadtest",
                                            timeout=3) as r:
                    specs = json.load(r)
                break
            except OSError:
                if time.time() > deadline:
                    pytest.fail("JupyterLab did not answer")
                time.sleep(0.5)
        assert "python3" in specs["kernelspecs"]
        with urllib.request.urlopen(f"http://127.0.0.1:{port}/lab?token=wsadtest", timeout=5) as r:
            assert r.status == 200
    finally:
        proc.terminate()
        proc.wait(timeout=30)
    make = subprocess.run(["make", "-n", "lab"], cwd=REPO, capture_output=True, text=True)
    assert "--ip 127.0.0.1" in make.stdout
