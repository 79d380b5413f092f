"""Studies from Python (notebooks) or a YAML file: stores x variants x seeds that plan, run
resumably in long-lived worker processes, and report (:class:`Study`)."""
from .plan import Plan
from .report import StudyReport
from .spec import RunSpec, expand_variants, preset
from .study import Study

__all__ = ["Plan", "StudyReport", "RunSpec", "expand_variants", "preset", "Study"]
