"""wsad: weakly supervised anomaly detection on video feature streams.

Per-segment features of long fixed-camera videos, one label per video, and
MIL training variants compared over seeds with honest statistics.
"""
from pathlib import Path

__version__ = "0.1.0"

#: The repository root (configs in ``conf/``, scenarios in ``synthetic/``).
PROJECT_ROOT = Path(__file__).resolve().parent.parent
