"""Training: the setup built from the config (:mod:`.setup`), one step
(:mod:`.step`), the loop around it (:mod:`.loop`), and what lets a stopped run
resume (:mod:`.progress`, :mod:`.resume`); operating points (:mod:`.operating`)."""
from .entry import train
from .loop import RunResult
from .operating import budget_table
from .setup import Setup, apply_ablation, build, build_terms, seed_everything
from .step import StepResult, objective, step

__all__ = ["RunResult", "train", "budget_table", "Setup", "apply_ablation", "build", "build_terms",
           "seed_everything", "StepResult", "objective", "step"]
