# One entry point per job. Each target builds .venv on first use from pyproject.toml.
PYTHON ?= python3
VENV := .venv
BIN := $(VENV)/bin
STAMP := $(VENV)/.installed

.PHONY: demo test lint bench clean

$(STAMP): pyproject.toml
	test -d $(VENV) || $(PYTHON) -m venv $(VENV)
	$(BIN)/python -m pip install --quiet --upgrade pip
	$(BIN)/python -m pip install --quiet -e ".[test]"
	touch $(STAMP)

demo: $(STAMP)
	$(BIN)/zhat demo
	$(BIN)/python examples/moth_traps.py

test: $(STAMP)
	$(BIN)/ruff check src tests benchmarks examples
	$(BIN)/python -m pytest

bench: $(STAMP)
	$(BIN)/python benchmarks/latent_gaussian.py
	$(BIN)/python benchmarks/lattice.py
	$(BIN)/python benchmarks/fit.py
	$(BIN)/python benchmarks/network.py

clean:
	rm -rf $(VENV) build src/*.egg-info .pytest_cache
