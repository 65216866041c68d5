# Two commands on a fresh machine: `make demo` and `make test`.
# Each creates .venv when missing and installs exactly the versions in
# requirements/lock.txt (hash-checked), then the project itself without
# touching those versions. `make lock` regenerates the lock (see DEVELOPERS.md).
PYTHON ?= python3
VENV ?= .venv
BIN := $(VENV)/bin
LOCK := requirements/lock.txt
STAMP := $(VENV)/.installed-stamp
# The locking tool, itself pinned so a regenerated lock does not depend on the day.
UV_VERSION := 0.13.9
LOCK_VENV := .venv-lock

.PHONY: demo test bench lock fresh clean

$(BIN)/python:
	$(PYTHON) -m venv $(VENV)

$(STAMP): $(BIN)/python pyproject.toml $(LOCK)
	$(BIN)/python -m pip install --quiet --disable-pip-version-check --require-hashes -r $(LOCK)
	$(BIN)/python -m pip install --quiet --disable-pip-version-check --no-cache-dir --no-deps --no-build-isolation -e .
	$(BIN)/python -m pip check
	touch $(STAMP)

demo: $(STAMP)
	$(BIN)/afterlook demo --dir demo-data
	@echo ""
	@echo "The demo files are in demo-data/: train.csv, cases.csv, model.json (and casebook.json once a case is saved)."
	@echo "The CLI lives in the project's venv: run '. $(VENV)/bin/activate' once per shell, then 'afterlook --help'"
	@echo "(or call it as $(BIN)/afterlook without activating)."

test: $(STAMP)
	$(BIN)/python -m pytest -q

bench: $(STAMP)
	$(BIN)/python benchmarks/run_all.py

# Resolve pyproject.toml's ranges (runtime + test + dask extras) and the
# installer/build tools in requirements/tools.in to exact versions with hashes.
# Versions already in the lock are kept when they still satisfy the ranges;
# `make lock UPGRADE=1` moves everything to the newest allowed release.
lock:
	$(PYTHON) -m venv $(LOCK_VENV)
	$(LOCK_VENV)/bin/python -m pip install --quiet --disable-pip-version-check uv==$(UV_VERSION)
	$(LOCK_VENV)/bin/uv pip compile pyproject.toml requirements/tools.in --extra test --extra dask \
		--universal --python-version 3.11 --generate-hashes --no-header \
		$(if $(UPGRADE),--upgrade,) -o $(LOCK)

# What CI sees: a fresh clone of the committed tree, its own venv, no pip cache.
fresh:
	d=$$(mktemp -d) && git clone --quiet . "$$d" && cd "$$d" && .ci/run

clean:
	rm -rf $(VENV) $(LOCK_VENV) demo-data
