"""wsad-study STUDY.yaml: run a study file (what ``wsad.Study`` does in a notebook)."""
from __future__ import annotations

import argparse
import sys
from pathlib import Path

from ..errors import WsadError, run_cli

PROG = "wsad-study"
EXAMPLE = """a study file:

  name: warehouse_terms
  stores: [warehouse_store]              # folders, or {name: folder}
  base: {recipe: windows, trainer.epochs: 15}
  variants: terms                        # a preset of conf/sweep/, or {key: [values]}
  seeds: 5
  folder: warehouse_terms                # the runs' folders (the study resumes from them)
  jobs: 2                                # worker processes, or launcher: slurm (submitit)

paths are taken relative to the study file."""
KEYS = ("name", "stores", "base", "variants", "seeds", "folder", "primary", "baseline", "alpha", "jobs", "launcher")


def _main(argv: list[str]) -> int:
    ap = argparse.ArgumentParser(prog=PROG, description="Run a study: variants x seeds x stores, resumable "
                                 "(finished runs are kept), then the seed-aggregated report.", epilog=EXAMPLE,
                                 formatter_class=argparse.RawDescriptionHelpFormatter)
    ap.add_argument("study", help="the study file (YAML)")
    ap.add_argument("--plan", action="store_true", help="show the runs and what is done; train nothing")
    args = ap.parse_args(argv)
    spec = _read(Path(args.study))
    from ..study import Study

    jobs, launcher = int(spec.pop("jobs", 2)), spec.pop("launcher", None)
    study = Study(**spec)
    print(study.plan())
    if args.plan:
        return 0
    runs = study.run(jobs=jobs, launcher=launcher)
    report = study.report()
    out = study.folder
    (out / "report.md").write_text(report.to_markdown() + "\n")
    report.to_csv(out / "report.csv")
    from ..evaluate.plots import save_figure

    save_figure(report.plot(), out / f"{study.primary}_by_variant.png")
    print()
    print(report.to_markdown())
    print(f"\n  {int((runs.status == 'done').sum())} of {len(runs)} runs done; report in {out}/report.md")
    return 0 if (runs.status == "done").all() else 1


def _read(path: Path) -> dict:
    import yaml

    if not path.is_file():
        raise WsadError(f"study file {path} does not exist")
    try:
        spec = yaml.safe_load(path.read_text()) or {}
    except yaml.YAMLError as err:
        raise WsadError(f"study file {path} is not valid YAML ({str(err).splitlines()[0]})") from None
    unknown = set(spec) - set(KEYS)
    if unknown:
        raise WsadError(f"study file {path}: unknown key(s) {', '.join(sorted(unknown))}; known: {', '.join(KEYS)}")
    if "stores" not in spec:
        raise WsadError(f"study file {path}: 'stores' is required (one or more feature stores)")
    here = path.resolve().parent
    rel = lambda p: str(p if Path(str(p)).is_absolute() else here / str(p))  # noqa: E731
    stores = spec["stores"]
    spec["stores"] = ({k: rel(v) for k, v in stores.items()} if isinstance(stores, dict)
                      else [rel(s) for s in ([stores] if isinstance(stores, str) else stores)])
    spec["folder"] = rel(spec.get("folder", path.stem))
    spec.setdefault("name", path.stem)
    return spec


def main() -> None:
    run_cli(lambda: _main(sys.argv[1:]), PROG)
