# Two commands on a fresh machine with Python 3.10+ and make: `make lab` and `make test`.
# Both create .venv when needed and are safe to run again.
PYTHON ?= python3
VENV   := .venv
BIN    := $(VENV)/bin

.PHONY: lab test bench clean

$(BIN)/python:
	$(PYTHON) -m venv $(VENV)
	$(BIN)/python -m pip install --quiet --upgrade pip

# Stamp files record which extras are installed; they are remade when pyproject.toml changes.
$(VENV)/.stamp-test: pyproject.toml | $(BIN)/python
	$(BIN)/python -m pip install --quiet -e '.[test]'
	touch $@

$(VENV)/.stamp-lab: pyproject.toml | $(BIN)/python
	$(BIN)/python -m pip install --quiet -e '.[notebook]'
	touch $@

test: $(VENV)/.stamp-test
	$(BIN)/python -m pytest

bench: $(VENV)/.stamp-test
	$(BIN)/python tests/benchmarks/bench_solver.py

# JupyterLab listens on this machine only; root (a container, say) needs --allow-root.
ROOT_FLAG := $(if $(filter 0,$(shell id -u)),--allow-root,)

lab: $(VENV)/.stamp-lab
	$(BIN)/jupyter lab --notebook-dir=notebooks --ServerApp.ip=127.0.0.1 $(ROOT_FLAG)

clean:
	rm -rf $(VENV) build *.egg-info .pytest_cache .hypothesis
