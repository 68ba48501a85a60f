# gasledger: two commands.
#   make demo   - install, generate the invented demo campaign, run the workflow, print the report path
#   make test   - install and run the test suite
PYTHON ?= python3
VENV := .venv
BIN := $(VENV)/bin
STAMP := $(VENV)/.installed
CORES ?= 2
DEMO_DATA := demo_data

.PHONY: demo test install clean-demo lint

$(BIN)/python:
	$(PYTHON) -m venv $(VENV)

# pip -qq prints errors only: a machine's own pip configuration (e.g. index folders it lacks) would otherwise
# print warnings that are not the project's
$(STAMP): pyproject.toml | $(BIN)/python
	$(BIN)/python -m pip install -qq --upgrade pip
	$(BIN)/python -m pip install -qq -e '.[test]'
	touch $(STAMP)

install: $(STAMP)

$(DEMO_DATA)/campaign.yaml: $(STAMP) $(wildcard synthetic_cubes/*.py)
	$(BIN)/python -m synthetic_cubes $(DEMO_DATA)

# gasledger run prints one line per job and, at the end, the report's absolute path (results/demo/report.html)
demo: $(DEMO_DATA)/campaign.yaml
	$(BIN)/gasledger run config/config.yaml --cores $(CORES)
	@echo "Tables: results/demo/limits.ecsv results/demo/budget.ecsv results/demo/budget.json"

test: $(STAMP)
	$(BIN)/python -m pytest

lint: $(STAMP)
	$(BIN)/ruff check .
	$(BIN)/python -m pytest -q tests/test_lint.py

clean-demo:
	rm -rf results/demo $(DEMO_DATA)
