# Two commands set everything up on a fresh machine: `make demo` and `make test`.
VENV ?= .venv
PY := $(VENV)/bin/python
STAMP := $(VENV)/.installed

.PHONY: demo test test-fast lint bench clean

$(STAMP): pyproject.toml
	python3 -m venv $(VENV)
	$(PY) -m pip install --quiet --upgrade pip
	$(PY) -m pip install --quiet -e ".[test]"
	touch $(STAMP)

demo: $(STAMP)
	$(VENV)/bin/tutti demo

# Two test processes (pytest-xdist): most integration tests wait on leases, sleeps and
# subprocesses, so two of them share the two cores well. `loadfile` keeps a module in one
# process: module fixtures (three messy-table jobs, the attacked store) run once, and tests
# that read what an earlier test of their module wrote find it.
PYTEST := OMP_NUM_THREADS=1 $(PY) -m pytest -q -p no:cacheprovider -n 2 --dist loadfile

test: $(STAMP)
	$(VENV)/bin/ruff check .
	$(PYTEST)

test-fast: $(STAMP)
	$(PYTEST) -m "not slow"

lint: $(STAMP)
	$(VENV)/bin/ruff check .
	$(VENV)/bin/ruff format --check .

bench: $(STAMP)
	OMP_NUM_THREADS=1 $(PY) benchmarks/throughput.py

clean:
	rm -rf $(VENV) .pytest_cache build *.egg-info
