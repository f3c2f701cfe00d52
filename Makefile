# Two entry points (see README, Quick start): `make screen` and `make test`.
# Both create .venv on first use and install the package with its test extra.
PYTHON ?= python3
VENV ?= .venv
BIN := $(VENV)/bin

.PHONY: screen test setup clean

$(BIN)/.installed: pyproject.toml
	$(PYTHON) -m venv $(VENV)
	$(BIN)/python -m pip install --quiet --upgrade pip
	$(BIN)/python -m pip install --quiet -e ".[test]"
	touch $@

setup: $(BIN)/.installed

screen: $(BIN)/.installed
	$(BIN)/screening run --rules rules/default.yaml --cores 2

test: $(BIN)/.installed
	$(BIN)/python -m pytest

clean:
	rm -rf results
