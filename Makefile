# Two commands do all set-up on a fresh machine:
#   make lab   - JupyterLab on the quickstart notebook
#   make test  - the whole test suite (installs what it needs itself)
PY ?= python3
VENV ?= .venv
BIN := $(VENV)/bin

.PHONY: lab test venv bench screenshot clean

$(BIN)/.installed: pyproject.toml
	$(PY) -m venv $(VENV)
	$(BIN)/python -m pip install -q --upgrade pip
	$(BIN)/python -m pip install -q -e '.[widgets,report,dev]'
	touch $@

venv: $(BIN)/.installed

# JupyterLab refuses to start as root unless told; pass the flag only when running as root.
ROOT_FLAG := $(if $(filter 0,$(shell id -u)),--allow-root,)

lab: venv
	$(BIN)/jupyter lab $(ROOT_FLAG) notebooks/quickstart.ipynb

# Type check (the layers listed under [tool.mypy] in pyproject.toml) and lint first; either failing fails the target.
test: venv
	$(BIN)/python -m mypy
	$(BIN)/ruff check src tests benchmarks tools
	$(BIN)/python -m pytest

# Refresh the README screenshot (docs/explorer.png) from the real-browser test.
screenshot: venv
	LOOPCRAFT_UPDATE_DOCS=1 LOOPCRAFT_REQUIRE_BROWSER=1 $(BIN)/python -m pytest tests/browser/test_explorer_browser.py -k slider_key

bench: venv
	for f in benchmarks/bench_*.py; do $(BIN)/python $$f || exit 1; done

clean:
	rm -rf $(VENV) build src/*.egg-info .pytest_cache
