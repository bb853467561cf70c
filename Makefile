# phasewake: everything installs into a local .venv with pinned versions (constraints.txt).
PYTHON ?= python3
VENV   := .venv
BIN    := $(VENV)/bin
STAMP  := $(VENV)/.installed

.PHONY: demo test check lint typecheck unit quick bench fuzz screenshots bundle wheel-check clean samples

$(STAMP): pyproject.toml constraints.txt
	$(PYTHON) -m venv $(VENV)
	$(BIN)/python -m pip install --quiet --upgrade pip
	$(BIN)/python -m pip install --quiet -c constraints.txt -e ".[test]"
	touch $(STAMP)

demo: $(STAMP)
	$(BIN)/phasewake demo --output demo-output

test: $(STAMP) lint typecheck unit

# the fast round while working: lint, types and every test not marked slow (under 2 minutes on 2 cores)
check: $(STAMP) lint typecheck quick

lint: $(STAMP)
	$(BIN)/ruff check core app tests sample_data packaging

typecheck: $(STAMP)
	$(BIN)/mypy core

unit: $(STAMP)
	QT_QPA_PLATFORM=offscreen $(BIN)/python -m pytest -q -p no:cacheprovider

quick: $(STAMP)
	QT_QPA_PLATFORM=offscreen $(BIN)/python -m pytest -q -p no:cacheprovider -m "not slow"

bench: $(STAMP)
	QT_QPA_PLATFORM=offscreen $(BIN)/python -m tests.benchmarks --full --output bench-results/summary.json

fuzz: $(STAMP)
	QT_QPA_PLATFORM=offscreen PHASEWAKE_FUZZ=long $(BIN)/python -m pytest -q -p no:cacheprovider tests/robustness

# make screenshots SIZE=1024x640 [QPA=xcb, with DISPLAY set, e.g. under Xvfb + openbox]
SIZE ?= 1400x900
QPA  ?= offscreen
screenshots: $(STAMP)
	QT_QPA_PLATFORM=$(QPA) $(BIN)/python -m phasewake.app.window.screenshots --size $(SIZE) --output screenshots/$(SIZE)-$(QPA)

samples: $(STAMP)
	$(BIN)/python sample_data/make_samples.py

bundle: $(STAMP)
	bash packaging/build_bundle.sh

clean:
	rm -rf $(VENV) build dist demo-output screenshots bench-results *.egg-info
