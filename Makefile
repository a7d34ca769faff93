# Two jobs for a fresh checkout: `make demo` (the bench UI on the simulated bench)
# and `make test` (the suite CI runs). Each sets up .venv on first use, from the
# lock file (exact versions); `make lock` refreshes the lock after pyproject.toml
# changes (see DEVELOPERS.md).
PY ?= python3
VENV := .venv
BIN := $(VENV)/bin
STAMP := $(VENV)/.installed

.PHONY: demo test bench lock clean

$(STAMP): pyproject.toml requirements.lock
	$(PY) -m venv $(VENV)
	$(BIN)/python -m pip install --quiet --upgrade pip
	$(BIN)/python -m pip install --quiet -r requirements.lock
	$(BIN)/python -m pip install --quiet --no-deps -e .
	touch $(STAMP)

demo: $(STAMP)
	$(BIN)/probelog demo

test: $(STAMP)
	$(BIN)/python -m pytest -q

bench: $(STAMP)
	$(BIN)/python bench/run.py

# Resolve pyproject.toml's dependencies (all extras) to exact versions.
lock: $(STAMP)
	$(BIN)/pip-compile --quiet --strip-extras --no-emit-index-url --no-emit-find-links \
		--extra test --extra bench --extra dev --extra catalog -o requirements.lock pyproject.toml

clean:
	rm -rf $(VENV) build *.egg-info .pytest_cache .mypy_cache .ruff_cache
