# One command sets everything up and does the job: `make demo`, `make test`.
# Targets create the virtual environment in .venv and install what they need.

PYTHON ?= python3
VENV ?= .venv
BIN := $(VENV)/bin
STAMP := $(VENV)/.installed

.PHONY: setup demo cli-demo lab test lint bench validation screenshots clean

setup: $(STAMP)

$(STAMP): pyproject.toml
	$(PYTHON) -m venv $(VENV)
	$(BIN)/python -m pip install --quiet --upgrade pip
	$(BIN)/python -m pip install --quiet -e ".[app,test]"
	touch $(STAMP)

PORT ?= 8866

## demo: the planner app on the demo scenario, served by Voilà on 127.0.0.1 (Ctrl-C stops it)
demo: setup
	@echo "circlesim planner: open http://127.0.0.1:$(PORT)/ in your browser (Ctrl-C stops it)."
	$(BIN)/python -m circlesim.app.serving notebooks/planner.ipynb --port=$(PORT)

## lab: JupyterLab with the notebooks, on 127.0.0.1
lab: setup
	$(BIN)/jupyter lab --ServerApp.root_dir=notebooks --ServerApp.ip=127.0.0.1

## cli-demo: the demo scenario on the command line (summary and CSV)
cli-demo: setup
	$(BIN)/circlesim run scenarios/flow_reduction_sevoflurane.toml

## test: the whole test suite
test: setup
	$(BIN)/python -m pytest -q

## lint: ruff over the project
lint: setup
	$(BIN)/ruff check .

## bench: speed benchmarks (ratios against a reference run in the same process)
bench: setup
	$(BIN)/python benchmarks/run.py

## validation: regenerate docs/validation.md from the published checks
validation: setup
	$(BIN)/python -m circlesim.published docs/validation.md

## screenshots: retake the user guide's pictures in docs/img (the tests never write there)
screenshots: setup
	CIRCLESIM_SCREENSHOT_DIR=docs/img CIRCLESIM_REQUIRE_BROWSER=1 PLAYWRIGHT_SKIP_BROWSER_DOWNLOAD=1 \
		$(BIN)/python -m pytest -q -m browser tests/test_browser.py

clean:
	rm -rf $(VENV) build *.egg-info .pytest_cache out
