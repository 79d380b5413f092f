"""wsad: weakly supervised anomaly detection on video feature streams.

Per-segment features of long fixed-camera videos, one label per video, and
MIL training variants compared over seeds with honest statistics.

The package reads downward: ``store`` (the feature store) <- ``data``
(standardising, caching, batching, scoring batches) <- ``bags``, ``heads``,
``pooling``, ``cluster`` <- ``terms`` <- ``train`` <- ``cli``; ``evaluate``
turns scores into metrics, ``report`` turns runs into tables and plots.
"""
__version__ = "0.1.0"
