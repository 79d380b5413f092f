"""wsad: weakly supervised anomaly detection on video feature streams.

Per-segment features of long fixed-camera videos, one label per video, and
MIL training variants compared over seeds with honest statistics.

The package reads downward: ``store`` (the feature store) <- ``data``
(standardising, caching, batching, the scorer) <- ``bags``, ``heads``,
``pooling``, ``cluster`` <- ``terms`` <- ``train`` <- ``cli``; ``evaluate``
turns scores into an evaluation (a value), ``publish`` sends it to the run folder
and MLflow (``tracking``), ``report`` turns runs into tables and plots.

The notebook surface is imported lazily (``import wsad`` stays cheap):
``wsad.Study`` (variants x seeds x stores: plan, run, report), ``wsad.load_run`` (a finished
run as an object), ``wsad.evaluate_scores`` (scores of any method, evaluated as a run is) and
``wsad.compose_config`` (the config a run would use; ``wsad.train.train`` runs it).
"""
__version__ = "0.1.0"

_LAZY = {"evaluate_scores": ("wsad.evaluate.from_scores", "evaluate_scores"),
         "compose_config": ("wsad.config", "compose_config"),
         "Study": ("wsad.study", "Study"),
         "load_run": ("wsad.publish.run", "load_run")}


def __getattr__(name: str):
    if name in _LAZY:
        import importlib

        module, attr = _LAZY[name]
        return getattr(importlib.import_module(module), attr)
    raise AttributeError(f"module 'wsad' has no attribute {name!r}")
