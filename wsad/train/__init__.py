"""Training: the setup built from the config (:mod:`.setup`), one step (:mod:`.step`), the
epochs around it (:mod:`.loop`), what lets a stopped run resume (:mod:`.progress`,
:mod:`.resume`), and a run in the order its data flows, build -> fit -> score -> evaluate ->
publish (:mod:`.run`, entered through :func:`train`)."""
from .entry import train
from .run import RunResult
from .setup import Setup, apply_ablation, build, build_terms, seed_everything
from .step import StepResult, objective, step

__all__ = ["RunResult", "train", "Setup", "apply_ablation", "build", "build_terms", "seed_everything",
           "StepResult", "objective", "step"]
