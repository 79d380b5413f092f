# wsad: every target installs what it needs through `setup`.
PYTHON ?= python3
VENV ?= .venv
BIN := $(VENV)/bin
TORCH_SPEC ?= torch==2.13.0
# torchvision only as a reference implementation in the tests (its wheel must match TORCH_SPEC;
# `import torchvision` fails beside the CPU torch, the tests load its model file on its own)
TORCHVISION_SPEC ?= torchvision==0.28.0
STAMP := $(VENV)/.installed
DEMO_DIR ?= demo_out

.PHONY: setup lint test test-slow demo docs bench bench-quick ui lab clean

setup: $(STAMP)

# Re-install only when the package metadata changes; torch goes first so that
# no other requirement drags in a large accelerator build.
$(STAMP): pyproject.toml
	test -x $(BIN)/python || $(PYTHON) -m venv $(VENV)
	$(BIN)/python -m pip install --quiet --upgrade pip
	$(BIN)/python -m pip install --quiet "$(TORCH_SPEC)"
	$(BIN)/python -m pip install --quiet "$(TORCHVISION_SPEC)" "$(TORCH_SPEC)"
	$(BIN)/python -m pip install --quiet -e ".[dev,video]"
	touch $(STAMP)

# Lint and import order first (ruff, configured in pyproject.toml), then the suite.
lint: setup
	$(BIN)/ruff check wsad hydra_plugins tests benchmarks scripts

# The suite on TEST_WORKERS processes (pytest-xdist; each file's tests stay on one process, so a
# module's expensive fixture is built once). TEST_WORKERS=0 runs it in this process.
TEST_WORKERS ?= 2
test: lint
	$(BIN)/python -m pytest -q tests -n $(TEST_WORKERS) --dist loadfile

# The notebooks at their default settings (minutes each; not part of `make test`).
test-slow: setup
	$(BIN)/python -m pytest -q tests -m slow

demo: setup
	bash scripts/demo.sh $(DEMO_DIR)

# The documentation site (docs/ + the executed notebooks) into site/; strict: a broken link or
# a failing notebook fails it. The notebooks run at their defaults (tens of minutes).
docs: setup
	$(BIN)/python scripts/build_docs.py --out site

# Performance at research scale (tens of minutes; writes benchmarks/results/full.json) and a
# reduced run (about 5 minutes; benchmarks/results/quick.json). Stores are generated once
# into benchmarks/.work (WSAD_BENCH_WORK to move them).
bench: setup
	cd benchmarks && ../$(BIN)/python run_all.py full

bench-quick: setup
	cd benchmarks && ../$(BIN)/python run_all.py quick

clean:
	rm -rf $(VENV) $(DEMO_DIR) .pytest_cache benchmarks/.work site

# MLflow UI on the loopback interface only (set UI_HOST to expose it deliberately).
UI_HOST ?= 127.0.0.1
UI_PORT ?= 5000
TRACKING_URI ?= sqlite:///$(CURDIR)/$(DEMO_DIR)/mlruns.db
ui: setup
	$(BIN)/mlflow ui --host $(UI_HOST) --port $(UI_PORT) --backend-store-uri $(TRACKING_URI)

# JupyterLab on the loopback interface, with this project's environment as the kernel.
LAB_HOST ?= 127.0.0.1
LAB_PORT ?= 8888
LAB_FLAGS ?= $(if $(filter 0,$(shell id -u)),--allow-root,)
lab: setup
	$(BIN)/python -m ipykernel install --sys-prefix --name wsad --display-name "wsad (.venv)" > /dev/null
	$(BIN)/jupyter lab --ip $(LAB_HOST) --port $(LAB_PORT) --no-browser --notebook-dir notebooks $(LAB_FLAGS)
