"""Console entry points (thin: parse, call the package, print)."""
import os

# MLflow 3 sends usage telemetry from background threads and waits for them when the process
# exits: about 3 s of every wsad process on a machine without internet, measured here. wsad
# processes opt out unless the user chose otherwise (MLFLOW_DISABLE_TELEMETRY=false opts in).
os.environ.setdefault("MLFLOW_DISABLE_TELEMETRY", "true")
