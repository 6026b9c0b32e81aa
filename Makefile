# taprig: the two commands of the README, and a few more for contributors.
# Everything runs from a fresh clone: the virtualenv and its packages are made on first use.

PYTHON ?= python3
VENV   := .venv
BIN    := $(VENV)/bin
STAMP  := $(VENV)/.installed-stamp
PYTEST_ARGS ?=

.PHONY: demo test soak bench setup browser clean

$(STAMP): pyproject.toml
	$(PYTHON) -m venv $(VENV)
	$(BIN)/python -m pip install --quiet --upgrade pip
	$(BIN)/python -m pip install --quiet -e '.[test]'
	touch $(STAMP)

setup: $(STAMP)

## The main job on the simulated rig: no hardware needed.
demo: $(STAMP)
	$(BIN)/taprig demo

## Every test (a few minutes on 2 cores). Installs what it needs first.
test: $(STAMP) browser
	$(BIN)/python -m pytest -n 2 -m "not soak" $(PYTEST_ARGS)

## Long-running soak tests; TAPRIG_SOAK_SECONDS bounds them (CI runs a short form).
soak: $(STAMP)
	$(BIN)/python -m pytest -m soak $(PYTEST_ARGS)

## Throughput figures against naive baselines measured in the same run.
bench: $(STAMP)
	$(BIN)/taprig bench

## Debian's Chromium for the dashboard's browser tests.
browser:
	@bash tools/ensure-chromium

clean:
	rm -rf $(VENV) build *.egg-info hostapp/*.egg-info .pytest_cache .hypothesis
