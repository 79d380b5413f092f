"""Execute a notebook with parameters (injected after its cell tagged ``parameters``, as papermill
does), with the kernel client the docs build uses: one that cannot wait forever for a reply whose
wake-up was lost (see ``build_docs._sliced_kernel_manager``).

    python scripts/run_notebook.py notebooks/06_your_own_data.ipynb out.ipynb -p STORE /path/to/store -p SEEDS 5

A value is read as YAML (``5`` an int, ``true`` a bool, ``[a, b]`` a list, anything else a string).
The kernel runs in the current folder. Exit 0 when every cell ran, 1 when a cell failed (the output
notebook keeps the error), 2 on bad input; one line either way.
"""
from __future__ import annotations

import argparse
import sys
from pathlib import Path

import yaml

sys.path.insert(0, str(Path(__file__).resolve().parent))
import build_docs  # noqa: E402


def parse(argv: list[str]) -> tuple[Path, Path, dict]:
    ap = argparse.ArgumentParser(prog="run_notebook.py", description=__doc__.split("\n\n")[0])
    ap.add_argument("notebook")
    ap.add_argument("out")
    ap.add_argument("-p", "--parameter", nargs=2, action="append", default=[], metavar=("NAME", "VALUE"))
    args = ap.parse_args(argv)
    src, out = Path(args.notebook), Path(args.out)
    if not src.is_file():
        raise SystemExit(f"run_notebook.py: no notebook at {src}")
    if out.resolve() == src.resolve():
        raise SystemExit("run_notebook.py: the output would overwrite the notebook; name another file")
    return src, out, {name: yaml.safe_load(value) for name, value in args.parameter}


def main(argv: list[str]) -> int:
    try:
        src, out, params = parse(argv)
    except SystemExit as stop:
        if isinstance(stop.code, str):
            print(stop.code, file=sys.stderr)
            return 2
        return 2 if stop.code else 0
    try:
        build_docs.execute_notebook(src, out, params, Path.cwd())
    except Exception as err:  # noqa: BLE001 - the output notebook keeps the whole traceback
        if hasattr(err, "ename"):   # papermill's execution error: the cell and the error raised in it
            what = f"cell [{err.exec_count}] raised {err.ename}: {err.evalue}"
        else:
            what = (str(err).strip().splitlines() or [type(err).__name__])[0]
        print(f"run_notebook.py: {src.name} stopped: {what} (the executed notebook is {out})", file=sys.stderr)
        return 1
    print(f"run_notebook.py: {src.name} executed into {out}")
    return 0


if __name__ == "__main__":
    sys.exit(main(sys.argv[1:]))
