"""Build the documentation site: the guide in docs/, the pages generated from the code (metric
catalogue, settings, the training command's help, the scenarios' measured tables, the benchmark
results), and the walkthrough notebooks executed with papermill.

    python scripts/build_docs.py [--out site] [--small] [--work DIR]

``--small`` runs the notebooks with the small parameters the test suite uses. The build is
strict: a broken link, a missing include or a failing notebook fails it.
"""
from __future__ import annotations

import argparse
import json
import shutil
import subprocess
import sys
import tempfile
import time
from pathlib import Path

import yaml

REPO = Path(__file__).resolve().parent.parent
# 5,085 training segments: above the small-collection mode's 4,000 (one model per run, as the
# notebooks' own defaults train)
SMALL_STORE = ["videos_per_camera.train=5", "videos_per_camera.test=4"]
#: The notebooks' parameters in the test suite (a few seconds to a minute each).
SMALL = {
    "01_first_experiment": {"SCENARIO_OVERRIDES": SMALL_STORE, "EPOCHS": 3},
    "02_ablation_study": {"SCENARIO_OVERRIDES": SMALL_STORE, "EPOCHS": 2, "SEEDS": 2, "JOBS": 1,
                          "VARIANTS": {"ablation.toggle": ["none", "smoothness", "sparsity"]}},
    "03_your_own_features": {"EPOCHS": 5, "SCENARIO_OVERRIDES": [*SMALL_STORE, "crops=5"], "CLIPS_PER_CAMERA": 2,
                             "CLIP_SECONDS": 1.3},
    "04_correlation_study": {"SEEDS": 2, "RHO_VALUES": [0.0, 0.97], "SHARE_VALUES": [0.0, 0.95], "EPOCHS": 2, "JOBS": 1,
                             "SCENARIO_OVERRIDES": SMALL_STORE},
    "05_operating_points": {"RECIPES": ["topk", "windows"], "SEEDS": 1, "EPOCHS": 2, "JOBS": 1,
                            "SCENARIO_OVERRIDES": SMALL_STORE},
    "06_your_own_data": {"RECIPES": ["topk", "windows"], "SEEDS": 2, "EPOCHS": 2, "JOBS": 1,
                         "SCENARIO_OVERRIDES": SMALL_STORE},
}


def generated(tree: Path) -> None:
    """The pages written from the code, into ``tree/generated`` and ``tree/bench``."""
    from wsad.cli.train import help_page
    from wsad.evaluate.catalogue import markdown
    from wsad.registry import search_dirs
    from wsad.settings import settings_table

    out = tree / "generated"
    out.mkdir(parents=True, exist_ok=True)
    (out / "metrics.md").write_text(markdown() + "\n")
    rows = ["| key | default | meaning |", "|---|---|---|"]
    rows += [f"| `{r['key']}` | `{r['default']}` | {r['meaning']} |" for r in settings_table()]
    (out / "settings.md").write_text("\n".join(rows) + "\n")
    (out / "train_help.txt").write_text(help_page(search_dirs()))
    text = (REPO / "synthetic" / "README.md").read_text()
    (out / "scenarios.md").write_text(text.split("\n", 1)[1] if text.startswith("# ") else text)
    bench = tree / "bench"
    bench.mkdir(exist_ok=True)
    for name in ("full.md", "quick.md"):
        shutil.copy(REPO / "benchmarks" / "results" / name, bench / name)


#: Seconds a notebook cell may take before its execution fails (the defaults' longest cell takes
#: a few minutes; a cell that never ends fails the build instead of hanging it).
CELL_TIMEOUT = 1800
#: Seconds between two looks at a kernel channel (below).
POLL_SLICE = 0.25


def _sliced_kernel_manager():
    """A kernel manager whose client waits for the kernel's messages in slices of POLL_SLICE.

    Why: the wake-up for a kernel message that has arrived is sometimes lost (measured here with
    papermill 2.7, nbclient 0.11: a notebook of six small widget cells, 30 executions two at a
    time, 4 of 180 cells waited out the whole per-cell timeout, then went on with the message that
    had been there all along; with no timeout, the default, such a wait never ends: the suite hung
    twice in widget cells). A poll that times out looks at the socket again and finds it, so a
    lost wake-up costs one slice, not the build."""
    from queue import Empty

    from jupyter_client.asynchronous.client import AsyncKernelClient
    from jupyter_client.channels import AsyncZMQSocketChannel
    from jupyter_client.manager import AsyncKernelManager
    from traitlets import Type, default

    class SlicedChannel(AsyncZMQSocketChannel):
        async def get_msg(self, timeout: float | None = None) -> dict:
            deadline = None if timeout is None else time.monotonic() + timeout
            while True:
                left = POLL_SLICE if deadline is None else max(0.0, min(POLL_SLICE, deadline - time.monotonic()))
                if await self.socket.poll(int(left * 1000)):
                    return await self._recv()
                if deadline is not None and time.monotonic() >= deadline:
                    raise Empty

    class SlicedClient(AsyncKernelClient):
        shell_channel_class = Type(SlicedChannel)
        iopub_channel_class = Type(SlicedChannel)
        stdin_channel_class = Type(SlicedChannel)
        control_channel_class = Type(SlicedChannel)

    class SlicedKernelManager(AsyncKernelManager):
        @default("client_factory")
        def _sliced_client(self):
            return SlicedClient

    return SlicedKernelManager


def execute_notebook(path: Path, out: Path, params: dict, work: Path) -> None:
    """One notebook executed by papermill (cwd ``work``), with the sliced kernel client."""
    import papermill

    papermill.execute_notebook(str(path), str(out), parameters=params, cwd=str(work), kernel_name="python3",
                               progress_bar=False, execution_timeout=CELL_TIMEOUT,
                               kernel_manager_class=_sliced_kernel_manager())


def execute_notebooks(into: Path, work: Path, small: bool, only: list[str] | None = None,
                      parallel: int = 2) -> dict[str, Path]:
    """Every notebook executed (:func:`execute_notebook`, by ``scripts/run_notebook.py``) into
    ``into``, ``parallel`` at a time, each in its own process (each notebook writes its own
    nb_work/NN folder); returns name -> path. A failing notebook raises an error naming it, with
    the last lines its process wrote.

    Processes, not threads of this one: papermill changes the process's working directory while it
    executes a notebook (two threads would restore each other's), and a process is killed at its
    deadline."""
    from concurrent.futures import ThreadPoolExecutor

    into.mkdir(parents=True, exist_ok=True)
    work.mkdir(parents=True, exist_ok=True)
    paths = [p for p in sorted((REPO / "notebooks").glob("*.ipynb")) if not only or p.stem in only]

    def run(path: Path) -> Path:
        out = into / path.name
        params = SMALL.get(path.stem, {}) if small else {}
        cmd = [sys.executable, str(Path(__file__).with_name("run_notebook.py")), str(path), str(out.resolve())]
        for name, value in params.items():   # JSON is YAML: run_notebook.py reads each value back as it was
            cmd += ["-p", name, json.dumps(value)]
        try:
            res = subprocess.run(cmd, capture_output=True, text=True, cwd=work, timeout=4 * CELL_TIMEOUT)
        except subprocess.TimeoutExpired as err:
            raise RuntimeError(f"notebook {path.stem} did not finish in {err.timeout:.0f} s") from None
        if res.returncode != 0:
            raise RuntimeError(f"notebook {path.stem} failed:\n" + "\n".join(res.stderr.splitlines()[-30:]))
        return out

    with ThreadPoolExecutor(max(1, parallel)) as pool:
        outs = list(pool.map(run, paths))
    return {p.stem: o for p, o in zip(paths, outs)}


def build_site(tree: Path, site: Path) -> None:
    """mkdocs build --strict of ``tree`` (a copy of docs/ with its generated pages and notebooks)."""
    cfg = yaml.safe_load((REPO / "mkdocs.yml").read_text())
    cfg.update(docs_dir=str(tree), site_dir=str(site))
    for ext in cfg["markdown_extensions"]:
        if isinstance(ext, dict) and "pymdownx.snippets" in ext:
            ext["pymdownx.snippets"]["base_path"] = [str(tree)]
    conf = tree.parent / "mkdocs.yml"
    conf.write_text(yaml.safe_dump(cfg, sort_keys=False))
    exe = Path(sys.executable).with_name("mkdocs")
    # cwd: mkdocs-jupyter keeps its cache in a relative .cache/ folder; in the work folder, not the checkout
    res = subprocess.run([str(exe), "build", "--strict", "-q", "-f", str(conf)], capture_output=True, text=True,
                         cwd=tree.parent)
    if res.returncode != 0:
        raise SystemExit(f"mkdocs build failed:\n{res.stdout}\n{res.stderr}")


def tree_of(work: Path) -> Path:
    tree = work / "docs"
    shutil.rmtree(tree, ignore_errors=True)
    shutil.copytree(REPO / "docs", tree)
    generated(tree)
    return tree


def main(argv: list[str]) -> None:
    ap = argparse.ArgumentParser()
    ap.add_argument("--out", default=str(REPO / "site"))
    ap.add_argument("--small", action="store_true")
    ap.add_argument("--work", default=None)
    args = ap.parse_args(argv)
    work = Path(args.work or tempfile.mkdtemp(prefix="wsad-docs-"))
    tree = tree_of(work)
    execute_notebooks(tree / "notebooks", work / "nb", args.small)
    build_site(tree, Path(args.out))
    print(f"site in {args.out}")


if __name__ == "__main__":
    main(sys.argv[1:])
