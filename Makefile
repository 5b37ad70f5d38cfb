# zline developer targets.  Every target creates/refreshes the local virtual environment itself.
PYTHON ?= python3
VENV   ?= .venv
BIN    := $(VENV)/bin
STAMP  := $(VENV)/.zline-installed
PORT   ?= 8888

.PHONY: demo test bench venv clean

$(STAMP): pyproject.toml
	test -x $(BIN)/python || $(PYTHON) -m venv $(VENV)
	$(BIN)/python -m pip install -q --upgrade pip
	$(BIN)/python -m pip install -q -e ".[test]"
	touch $(STAMP)

venv: $(STAMP)

## The main job: the demo notebook in JupyterLab on bundled demo data.
demo: $(STAMP)
	$(BIN)/zline demo-data notebooks/demo-data --quiet
	$(BIN)/jupyter lab --ip=127.0.0.1 --port=$(PORT) $(if $(filter 0,$(shell id -u)),--allow-root,) notebooks/galaxy_redshift.ipynb

## The whole test suite (a browser test fails, not skips, when CI=true and chromium is missing).
test: $(STAMP)
	$(BIN)/python -m pytest

## Benchmarks: ratios against named baselines measured in the same run.
bench: $(STAMP)
	$(BIN)/python tests/benchmarks/run.py

clean:
	rm -rf $(VENV) build .pytest_cache
