"""What every run of a worker imports, at the worker's start (importing this
module is the preload; :mod:`wsad.workers`)."""
import os

os.environ.setdefault("MLFLOW_DISABLE_TELEMETRY", "true")

import torch  # noqa: E402,F401
import torch._dynamo  # noqa: E402,F401  (any optimiser imports it)

import wsad.config  # noqa: E402,F401
import wsad.train  # noqa: E402,F401
from wsad.tracking.client import load  # noqa: E402

load()
