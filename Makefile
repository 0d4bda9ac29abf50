# Quickstart targets bootstrap a local virtual environment (.venv) from a fresh clone.
PYTHON ?= python3
VENV := .venv
PY := $(VENV)/bin/python
STAMP := $(VENV)/.installed

.PHONY: demo test setup bench bench-quick clean

$(STAMP): pyproject.toml
	$(PYTHON) -m venv $(VENV)
	$(PY) -m pip install --quiet --upgrade pip
	$(PY) -m pip install --quiet -e '.[test,cluster]'
	touch $(STAMP)

setup: $(STAMP)

demo: $(STAMP)
	$(PY) -m netprobe.demo --out demo-report

test: $(STAMP)
	$(PY) -m pytest -q

bench: $(STAMP)
	$(PY) -m benchmarks.run --full

bench-quick: $(STAMP)
	$(PY) -m benchmarks.run --quick

clean:
	rm -rf $(VENV) demo-report .pytest_cache
