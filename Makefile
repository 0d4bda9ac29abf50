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

# The default suite runs in TEST_WORKERS processes (pytest-xdist) with one BLAS/numba thread each: on the
# 2-core CI machine two single-threaded workers keep both cores busy through the many short tests and
# subprocesses, where one process left the second core idle (timings in benchmarks/RESULTS.md).
TEST_WORKERS ?= 2

test: $(STAMP)
	OMP_NUM_THREADS=1 OPENBLAS_NUM_THREADS=1 MKL_NUM_THREADS=1 NUMBA_NUM_THREADS=1 $(PY) -m pytest -q -n $(TEST_WORKERS)

docs: $(DOCS_STAMP)
	$(PY) -m sphinx -b html -W --keep-going -q docs docs/_build/html

bench: $(STAMP)
	$(PY) -m benchmarks.run --full

bench-quick: $(STAMP)
	$(PY) -m benchmarks.run --quick

clean:
	rm -rf $(VENV) demo-report .pytest_cache docs/_build docs/api/generated docs/reference/generated
