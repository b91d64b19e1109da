# The whole set-up on a fresh machine is `make demo` or `make test`:
# each creates .venv when it is missing and installs the project into it.
PYTHON ?= python3
VENV := .venv
BIN := $(VENV)/bin
STAMP := $(VENV)/.installed

.PHONY: demo test bench clean

$(STAMP): pyproject.toml
	test -x $(BIN)/python || $(PYTHON) -m venv $(VENV)
	$(BIN)/python -m pip install --quiet --upgrade pip
	$(BIN)/python -m pip install --quiet -e '.[test]'
	touch $(STAMP)

demo: $(STAMP)
	$(BIN)/sqlrisk demo

test: $(STAMP)
	$(BIN)/python -m pytest

bench: $(STAMP)
	$(BIN)/python -m tests.benchmarks.run
	$(BIN)/python -m tests.benchmarks.scale
	$(BIN)/python -m tests.benchmarks.spark

clean:
	rm -rf $(VENV) .pytest_cache build *.egg-info
