# Two commands for a fresh clone: `make demo` and `make test`.
PYTHON ?= python3
VENV := .venv
PY := $(VENV)/bin/python
HOST ?= 127.0.0.1
PORT ?= 8000
DEMO_DB ?= .foldwise/demo.db

.PHONY: demo test lint unit browser-deps node-deps pg-start pg-stop bench coverage floors clean

$(VENV)/.installed-test: pyproject.toml
	$(PYTHON) -m venv $(VENV)
	$(PY) -m pip install --quiet --upgrade pip
	$(PY) -m pip install --quiet -e '.[test]'
	touch $@

$(VENV)/.installed: pyproject.toml
	$(PYTHON) -m venv $(VENV)
	$(PY) -m pip install --quiet --upgrade pip
	$(PY) -m pip install --quiet -e .
	touch $@

demo: $(VENV)/.installed
	$(VENV)/bin/foldwise demo --db $(DEMO_DB) --host $(HOST) --port $(PORT)

# Chromium comes from Debian's packages (a browser download of the test tools' own does not work
# here); installed when missing and we may, otherwise the browser tests say why they cannot run.
browser-deps:
	@command -v chromium >/dev/null 2>&1 || { \
	  if [ "$$(id -u)" = 0 ] && command -v apt-get >/dev/null 2>&1; then \
	    apt-get update -qq && DEBIAN_FRONTEND=noninteractive apt-get install -y -qq chromium >/dev/null; \
	  else echo "chromium is missing: install Debian's chromium package for the browser tests"; fi; }

# node (Debian's nodejs) runs the README's JavaScript push against a real server; installed like chromium.
node-deps:
	@command -v node >/dev/null 2>&1 || { \
	  if [ "$$(id -u)" = 0 ] && command -v apt-get >/dev/null 2>&1; then \
	    apt-get update -qq && DEBIAN_FRONTEND=noninteractive apt-get install -y -qq nodejs >/dev/null; \
	  else echo "node is missing: install Debian's nodejs package for the JavaScript push test"; fi; }

lint: $(VENV)/.installed-test
	$(PY) -m ruff check app tests demo_data

# The store's tests run against PostgreSQL too, in a throwaway cluster in .foldwise/pg that lives as long
# as the suite: always under CI or FOLDWISE_PG=1 (installed from Debian's packages when missing), otherwise
# when initdb is at hand; without one those tests skip and say why.
unit: $(VENV)/.installed-test
	bash .ci/postgres.sh with $(PY) -m pytest

# The same cluster by hand: pg-start writes its URL to .foldwise/pg/url.
pg-start:
	bash .ci/postgres.sh start

pg-stop:
	bash .ci/postgres.sh stop

test: browser-deps node-deps lint unit

# The benchmarks in tests/benchmarks/ (minutes; not part of `make test`). Every script runs; the target
# fails when any of them missed a target.
bench: $(VENV)/.installed-test
	@status=0; for script in $(filter-out %/bench_coverage.py,$(wildcard tests/benchmarks/bench_*.py)); do \
	  $(PY) $$script || status=1; done; exit $$status

# The coverage simulation of the intervals beside the nested estimate (tests/benchmarks/bench_coverage.py):
# about an hour on 2 cores; replications are cached under .foldwise/coverage/, so it may be stopped and
# run again to continue (e.g. COVERAGE_ARGS="--minutes 30"). Fails when the headline interval misses its targets.
coverage: $(VENV)/.installed-test
	$(PY) tests/benchmarks/bench_coverage.py $(COVERAGE_ARGS)

# The lowest versions pyproject.toml allows for the main dependencies, pinned exactly (.ci/floors.py), in
# their own .floors-venv, running the runner's and the payload's tests: the floors must be what the code
# really needs. The test tools come at their current versions.
FLOORS_VENV := .floors-venv
FLOORS_TESTS := tests/runner tests/test_consistency.py tests/test_packed.py tests/test_wire.py
floors:
	$(PYTHON) -m venv $(FLOORS_VENV)
	$(PYTHON) .ci/floors.py > $(FLOORS_VENV)/floors.txt
	$(FLOORS_VENV)/bin/python -m pip install --quiet --upgrade pip
	$(FLOORS_VENV)/bin/python -m pip install --quiet -c $(FLOORS_VENV)/floors.txt -e . pytest hypothesis \
	  'dask[distributed]' nbclient nbformat ipykernel ipywidgets
	$(FLOORS_VENV)/bin/python -m pip freeze | grep -iE '^(scikit-learn|numpy|scipy|pandas|pydantic|joblib|skops)=='
	# starlette's test client at the fastapi floor uses an alias the newest anyio deprecates (tests only)
	$(FLOORS_VENV)/bin/python -m pytest -p no:cacheprovider \
	  -W "ignore:The anyio.abc.BlockingPortal alias:DeprecationWarning" $(FLOORS_TESTS)

clean:
	rm -rf $(VENV) $(FLOORS_VENV) .foldwise build *.egg-info
