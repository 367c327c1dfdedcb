# Two entry points: `make demo` captions the bundled demo video, `make test` runs the tests.
# Both create the virtual environment in .venv on first use.
PYTHON ?= python3
VENV := .venv
BIN := $(VENV)/bin
READY := $(VENV)/.installed

.PHONY: demo test check bench clean

$(READY): pyproject.toml
	$(PYTHON) -m venv $(VENV)
	$(BIN)/python -m pip install --quiet --upgrade pip
	$(BIN)/python -m pip install --quiet -e '.[test]'
	touch $(READY)

demo: $(READY)
	$(BIN)/captioner caption demo_media/demo.mp4 -o - --explain

test: $(READY)
	$(BIN)/python -m pytest

# Lint and type checks (pinned tool versions in the `check` extra).
check: $(READY)
	$(BIN)/python -m pip install --quiet -e '.[test,check]'
	$(BIN)/ruff check captioner tests training
	$(BIN)/mypy

bench: $(READY)
	$(BIN)/python tests/benchmarks/speed.py

clean:
	rm -rf $(VENV) .pytest_cache
