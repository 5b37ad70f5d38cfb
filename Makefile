# zline developer targets.  Every target creates/refreshes the local virtual environment itself.
PYTHON ?= python3
VENV   ?= .venv
BIN    := $(VENV)/bin
STAMP  := $(VENV)/.zline-installed
PORT   ?= 8888

.PHONY: demo demo-files test bench venv clean

$(STAMP): pyproject.toml
	test -x $(BIN)/python || $(PYTHON) -m venv $(VENV)
	$(BIN)/python -m pip install -q --upgrade pip
	$(BIN)/python -m pip install -q -e ".[test]"
	touch $(STAMP)

venv: $(STAMP)

## The main job: the galaxy notebook in JupyterLab on the invented demo spectra.  JupyterLab works on
## copies in $(DEMO_DIR) (git-ignored, like notebooks/demo-data), so running and saving never touch the
## tracked notebooks; everything the notebooks write lands in $(DEMO_DIR)/scratch.
demo: $(STAMP)
	$(MAKE) --no-print-directory demo-files
	$(BIN)/jupyter lab --ip=127.0.0.1 --port=$(PORT) $(if $(filter 0,$(shell id -u)),--allow-root,) \
	  --ServerApp.root_dir=$(DEMO_DIR) --LabApp.default_url=/lab/tree/galaxy_redshift.ipynb

## The demo's preparation (needs the venv): demo data, and a working copy of each notebook.  A copy you
## changed is kept (delete it to get the current notebook); an untouched one follows notebooks/.
DEMO_DIR ?= notebooks/scratch/demo
demo-files:
	$(BIN)/zline demo-data notebooks/demo-data --quiet
	mkdir -p $(DEMO_DIR)/.as-copied
	ln -sfn $(CURDIR)/notebooks/demo-data $(DEMO_DIR)/demo-data
	@for nb in notebooks/*.ipynb; do \
	  name=$$(basename "$$nb"); copy="$(DEMO_DIR)/$$name"; orig="$(DEMO_DIR)/.as-copied/$$name"; \
	  if [ ! -e "$$copy" ] || cmp -s "$$copy" "$$orig"; then \
	    cp "$$nb" "$$copy" && cp "$$nb" "$$orig"; \
	  elif ! cmp -s "$$nb" "$$orig"; then \
	    echo "kept your changed $$copy; notebooks/$$name is newer (delete the copy to get it)"; \
	  fi; \
	done

## The whole test suite (a browser test fails, not skips, when CI=true and chromium is missing).
test: $(STAMP)
	$(BIN)/python -m pytest

## Benchmarks: ratios against named baselines measured in the same run.
bench: $(STAMP)
	$(BIN)/python tests/benchmarks/run.py

clean:
	rm -rf $(VENV) build .pytest_cache
