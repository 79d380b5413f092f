"""wsad-train: the Hydra app over conf/ (one run, or -m for a sweep)."""
from __future__ import annotations

import gc
import os
import sys
from pathlib import Path

import hydra
from omegaconf import DictConfig

from .. import registry
from ..errors import WsadError, guarded
from ..resources import CONF_DIR
from ..settings import check_overrides, parse_overrides
from .console import metric_lines

PROG = "wsad-train"


@hydra.main(config_path=str(CONF_DIR), config_name="config", version_base="1.3")
def _app(cfg: DictConfig) -> float:
    from hydra.core.hydra_config import HydraConfig

    from ..timeline import line, mark
    from ..train import train

    mark("config")
    # what the imports made (no collection first: it would walk them all); MLflow is imported
    # later, beside the training (wsad.publish.tracked), and frozen with the run's survivors
    gc.freeze()
    overrides = list(HydraConfig.get().overrides.task)
    res = guarded(lambda: train(cfg, overrides), PROG)
    print(end_of_run(res, cfg))
    _freeze_survivors()
    mark("end")
    if line():
        print(line())
    return res.objective


def end_of_run(res, cfg: DictConfig) -> str:
    """The primary metric with its interval and the other console metrics; then, when the store
    has an fps, the operating point; then where the run is."""
    budget = float((cfg.get("evaluate") or {}).get("budget", 1.0))
    lines = [f"{PROG}: " + metric_lines(res.metrics, budget), f"  run folder {res.out_dir} (summary.json)"]
    if res.run_id:
        lines.append(f"  MLflow run {res.run_id}")
    return "\n".join(lines)


def _freeze_survivors() -> None:
    """Move every object alive now into the collector's permanent generation (after each run;
    the imports' objects were frozen before it). The full collections of later runs, and
    the interpreter at exit, then skip about a million objects (torch, MLflow, pandas) that
    live to the end anyway: measured here, a 6-run sweep ended 1 s sooner. Objects freed by
    their reference count are freed as before; cycles made by a run are collected first."""
    gc.collect()
    gc.freeze()


def check_arguments(argv: list[str], dirs: list[Path]) -> None:
    """The mistakes Hydra would answer with a screenful, answered in one line: an unknown
    option of a config group, an unknown term, a missing data.root, a misspelt key or a wrong
    type in a typed group (:func:`wsad.settings.check_overrides`). Read with Hydra's parser."""
    args = [a for a in argv if not a.startswith("-")]
    parsed = parse_overrides(args)
    keys = {o.key_or_group for o in parsed}
    if "data.root" not in keys and "trainer.resume" not in keys and not any(
            a in ("--help", "-h", "--info") or a.startswith("--cfg") for a in argv):
        raise WsadError("data.root=DIR is required (a feature store; make one with wsad-synth or "
                        "wsad-index)")
    terms = registry.options("terms", dirs)
    for o in parsed:
        key = o.key_or_group
        if key.startswith("objective.") and key.split(".", 1)[1] not in terms:
            raise WsadError(f"{key} is not a term; known terms: {', '.join(terms)} (a term of your "
                            "own: terms/NAME.yaml in a folder on hydra.searchpath; see DEVELOPERS.md)")
        if key == "terms":
            raise WsadError("terms is not a group to choose from: every terms/NAME.yaml is a term; "
                            "switch one on with objective.NAME=WEIGHT")
        if key not in registry.GROUPS or o.is_delete():
            continue
        if o.is_sweep_override() and not o.is_choice_sweep():
            continue   # a glob, range or interval: Hydra says what it makes of it
        known = registry.options(key, dirs)
        for option in (list(o.sweep_iterator()) if o.is_sweep_override() else [o.value()]):
            if isinstance(option, str) and option not in known:
                raise WsadError(f"{key}={option} is not known; choose one of: {', '.join(known)}")
    check_overrides(args)


def help_page(dirs: list[Path]) -> str:
    """What wsad-train does, its recipes (one line each, from their YAML), examples, sweeps."""
    recipes = []
    for name in registry.options("recipe", dirs):
        path = next(p for d in dirs if (p := Path(d) / "recipe" / f"{name}.yaml").is_file())
        first = [ln[1:].strip() for ln in path.read_text().splitlines()[:3]
                 if ln.startswith("#") and "@package" not in ln]
        recipes.append(f"  {name:<14}{first[0] if first else ''}")
    return f"""usage: wsad-train data.root=STORE [recipe=NAME] [seed=N] [key=value ...] [-m]

Train one MIL variant on a feature store, evaluate it on the test split (frame AUC and AP with
intervals, the video decision, the operating point at a false-alarm budget) and publish it: the
run folder (summary.json, scores, plots, checkpoint) and an MLflow run.

recipes (recipe=NAME):
{chr(10).join(recipes)}

examples:
  wsad-train data.root=warehouse_store recipe=topk seed=0
  wsad-train data.root=warehouse_store recipe=windows trainer.epochs=15 objective.cluster_distance=0.1
  wsad-train -m data.root=warehouse_store recipe=windows sweep=terms seed=0,1,2 hydra/launcher=workers

settings are Hydra overrides, key=value: groups (recipe=, bags=, head=, pooling=, optim=, schedule=),
objective.TERM=WEIGHT (0 disables a term), trainer.*, data.*, evaluate.*, tracking.*. -m runs a
sweep: every combination of comma-separated values, one parent MLflow run with a child per trial.

the full configuration: wsad-train data.root=STORE --cfg job   (Hydra's own help: --hydra-help)
"""


def main() -> None:
    from ..timeline import mark

    mark("imports")
    os.environ.setdefault("WSAD_LAUNCH_DIR", os.getcwd())
    if any(a in ("-h", "--help") for a in sys.argv[1:]):
        print(help_page(registry.search_dirs(sys.argv[1:])))
        sys.exit(0)

    def prepare() -> None:
        dirs = registry.search_dirs(sys.argv[1:])
        registry.register_terms(dirs)
        check_arguments(sys.argv[1:], dirs)

    guarded(prepare, PROG)
    from ..sweep import start_workers

    start_workers(sys.argv[1:])   # hydra/launcher=workers: their imports overlap Hydra's start
    _app()
