# Quickstart targets bootstrap a local virtual environment (.venv) from a fresh clone.
PYTHON ?= python3
VENV := .venv
PY := $(VENV)/bin/python
STAMP := $(VENV)/.installed
DOCS_STAMP := $(VENV)/.installed-docs

.PHONY: demo test setup bench bench-quick docs clean

$(STAMP): pyproject.toml
	$(PYTHON) -m venv $(VENV)
	$(PY) -m pip install --quiet --upgrade pip
	$(PY) -m pip install --quiet -e '.[test,cluster]'
	touch $(STAMP)

$(DOCS_STAMP): $(STAMP)
	$(PY) -m pip install --quiet -e '.[test,cluster,docs]'
	touch $(DOCS_STAMP)

setup: $(STAMP)

demo: $(STAMP)
	$(PY) -m netprobe.demo --out demo-report

test: $(STAMP)
	$(PY) -m pytest -q

docs: $(DOCS_STAMP)
	$(PY) -m sphinx -b html -W --keep-going -q docs docs/_build/html

bench: $(STAMP)
	$(PY) -m benchmarks.run --full

bench-quick: $(STAMP)
	$(PY) -m benchmarks.run --quick

clean:
	rm -rf $(VENV) demo-report .pytest_cache docs/_build docs/api/generated docs/reference/generated
