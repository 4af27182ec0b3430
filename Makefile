# Two commands on a fresh machine with Python 3.10+ and make: `make lab` and `make test`.
# Both create .venv when needed and are safe to run again.
PYTHON ?= python3
VENV   := .venv
BIN    := $(VENV)/bin

.PHONY: lab test bench screenshot clean

$(BIN)/python:
	$(PYTHON) -m venv $(VENV)
	$(BIN)/python -m pip install --quiet --upgrade pip

# ampplan's Jupyter server extension (BokehJS from the local server) is enabled by this file.
# `pip install .` places it from pyproject's data-files; an editable install skips data-files, so
# the development environment gets the same file copied here.
SERVER_CONFIG := $(VENV)/etc/jupyter/jupyter_server_config.d/ampplan.json

# Stamp files record which extras are installed; they are remade when pyproject.toml changes.
$(VENV)/.stamp-test: pyproject.toml | $(BIN)/python
	$(BIN)/python -m pip install --quiet -e '.[test]'
	touch $@

$(VENV)/.stamp-lab: pyproject.toml | $(BIN)/python
	$(BIN)/python -m pip install --quiet -e '.[notebook]'
	touch $@

$(SERVER_CONFIG): jupyter-config/jupyter_server_config.d/ampplan.json | $(BIN)/python
	mkdir -p $(dir $@)
	cp $< $@

test: $(VENV)/.stamp-test $(SERVER_CONFIG)
	$(BIN)/python -m pytest

bench: $(VENV)/.stamp-test $(SERVER_CONFIG)
	$(BIN)/python tests/benchmarks/bench_solver.py
	$(BIN)/python tests/benchmarks/bench_browser.py
	$(BIN)/python tests/benchmarks/bench_plan.py
	$(BIN)/python tests/benchmarks/bench_whatif.py

# JupyterLab listens on this machine only; root (a container, say) needs --allow-root.
ROOT_FLAG := $(if $(filter 0,$(shell id -u)),--allow-root,)

# JupyterLab's default notebook windowing ("full") can leave bokeh canvases unrendered; the
# shipped settings (jupyter-config/lab-settings) choose "contentVisibility". They are JupyterLab's
# defaults for this environment (overrides.json), so a user's own settings still win.
LAB_OVERRIDES := $(VENV)/share/jupyter/lab/settings/overrides.json

$(LAB_OVERRIDES): jupyter-config/lab-settings/overrides.json | $(BIN)/python
	mkdir -p $(dir $@)
	cp $< $@

lab: $(VENV)/.stamp-lab $(SERVER_CONFIG) $(LAB_OVERRIDES)
	$(BIN)/jupyter lab --notebook-dir=notebooks --ServerApp.ip=127.0.0.1 $(ROOT_FLAG)

# Regenerates docs/canvas.png, the README's picture of the canvas: captured from real JupyterLab in
# headless Chromium by the browser test's screenshot helper (needs Debian's chromium).
screenshot: $(VENV)/.stamp-test $(SERVER_CONFIG)
	AMPPLAN_REQUIRE_BROWSER=1 $(BIN)/python -m pytest -q -p no:cacheprovider \
		tests/browser/test_lab.py::test_notebook_live_in_jupyterlab -k workflow --screenshot-to=docs/canvas.png

clean:
	rm -rf $(VENV) build *.egg-info .pytest_cache .hypothesis
