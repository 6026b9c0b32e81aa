# taprig: the two commands of the README, and a few more for contributors.
# Everything runs from a fresh clone: the virtualenv and its packages are made on first use.

PYTHON ?= python3
VENV   := .venv
BIN    := $(VENV)/bin
STAMP  := $(VENV)/.installed-stamp
PYTEST_ARGS ?=

.PHONY: demo test soak reliability bench setup browser poppler micropython clean

$(STAMP): pyproject.toml
	$(PYTHON) -m venv $(VENV)
	$(BIN)/python -m pip install --quiet --upgrade pip
	$(BIN)/python -m pip install --quiet -e '.[test,bench]'
	touch $(STAMP)

setup: $(STAMP)

## The main job on the simulated rig: no hardware needed.
demo: $(STAMP)
	$(BIN)/taprig demo

# One BLAS thread per test worker: two workers on two cores already fill the machine.
export OPENBLAS_NUM_THREADS ?= 1
MICROPYTHON_MODULES := $(CURDIR)/.cache/micropython/node_modules

## Every test (a few minutes on 2 cores). Installs what it needs first.
test: $(STAMP) browser poppler micropython
	TAPRIG_MICROPYTHON_NODE_MODULES=$(MICROPYTHON_MODULES) $(BIN)/python -m pytest -n 2 -m "not soak and not reliability" $(PYTEST_ARGS)

## Long-running soak tests; TAPRIG_SOAK_SECONDS bounds them (CI runs a short form).
soak: $(STAMP)
	$(BIN)/python -m pytest -m soak $(PYTEST_ARGS)

## The reliability campaign (docs/reliability.md): a short form (tens of seconds) unless TAPRIG_RELIABILITY=full.
reliability: $(STAMP)
	$(BIN)/python -m pytest -n 2 -m reliability -rA $(PYTEST_ARGS)

## Throughput figures against naive baselines measured in the same run.
bench: $(STAMP)
	$(BIN)/taprig bench

## MicroPython's WebAssembly port (npm), to run the reference firmware under a real MicroPython in the tests.
micropython:
	@bash tools/ensure-micropython

## Debian's poppler-utils (pdftotext, pdftoppm) to read back the handout's PDF in the tests.
poppler:
	@bash tools/ensure-poppler

## Debian's Chromium for the dashboard's browser tests.
browser:
	@bash tools/ensure-chromium

clean:
	rm -rf $(VENV) .cache build *.egg-info hostapp/*.egg-info .pytest_cache .hypothesis
