# Two jobs for a fresh checkout: `make demo` (the bench UI on the simulated bench)
# and `make test` (the suite CI runs). Each sets up .venv on first use.
PY ?= python3
VENV := .venv
BIN := $(VENV)/bin
STAMP := $(VENV)/.installed

.PHONY: demo test bench clean

$(STAMP): pyproject.toml
	$(PY) -m venv $(VENV)
	$(BIN)/python -m pip install --quiet --upgrade pip
	$(BIN)/python -m pip install --quiet -e ".[test,bench]"
	touch $(STAMP)

demo: $(STAMP)
	$(BIN)/probelog demo

test: $(STAMP)
	$(BIN)/python -m pytest -q

bench: $(STAMP)
	$(BIN)/python bench/run.py

clean:
	rm -rf $(VENV) build *.egg-info .pytest_cache
