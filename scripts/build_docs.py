"""Build the documentation site: the guide in docs/, the pages generated from the code (metric
catalogue, settings, the training command's help, the scenarios' measured tables, the benchmark
results), and the walkthrough notebooks executed with papermill.

    python scripts/build_docs.py [--out site] [--small] [--work DIR]

``--small`` runs the notebooks with the small parameters the test suite uses. The build is
strict: a broken link, a missing include or a failing notebook fails it.
"""
from __future__ import annotations

import argparse
import shutil
import subprocess
import sys
import tempfile
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


def execute_notebooks(into: Path, work: Path, small: bool, only: list[str] | None = None,
                      parallel: int = 2) -> dict[str, Path]:
    """Every notebook executed with papermill (cwd ``work``) into ``into``, ``parallel`` kernels at a
    time (each notebook writes its own nb_work/NN folder); returns name -> path. A failing
    notebook raises papermill's error naming the cell."""
    from concurrent.futures import ThreadPoolExecutor

    import papermill

    into.mkdir(parents=True, exist_ok=True)
    work.mkdir(parents=True, exist_ok=True)
    paths = [p for p in sorted((REPO / "notebooks").glob("*.ipynb")) if not only or p.stem in only]

    def run(path: Path) -> Path:
        out = into / path.name
        papermill.execute_notebook(str(path), str(out), parameters=SMALL.get(path.stem, {}) if small else {},
                                   cwd=str(work), kernel_name="python3", progress_bar=False)
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
