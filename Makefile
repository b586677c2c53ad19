# beamaudit developer loop. `make demo` and `make test` do all the set-up on a fresh machine.
PYTHON ?= python3
VENV   := .venv
PY     := $(VENV)/bin/python
STAMP  := $(VENV)/.installed

.PHONY: install demo serve test test-fast lint format bench clean

$(STAMP): pyproject.toml
	test -x $(PY) || $(PYTHON) -m venv $(VENV)
	$(PY) -m pip install --quiet --upgrade pip
	$(PY) -m pip install --quiet -e ".[test,dev]"
	touch $(STAMP)

install: $(STAMP)

## The main job on the embedded default (SQLite): invented hospital, reviews, dashboards.
demo: $(STAMP)
	$(PY) -m beamaudit demo --output demo-output

## Serve whatever the local database holds.
serve: $(STAMP)
	$(PY) -m beamaudit serve

## Test processes of `make test` (pytest-xdist): the suite is sized for a 2-core machine.
## A module's tests run in one of them; the listener tests and the demo's too (tests/conftest.py).
TEST_WORKERS ?= 2
XDIST := -n $(TEST_WORKERS)

## The whole test suite (store tests on SQLite, and on PostgreSQL when BEAMAUDIT_TEST_POSTGRES_URL is set).
test: $(STAMP)
	$(PY) -m pytest $(XDIST)

## Everything but the slow and peer-dependent tests.
test-fast: $(STAMP)
	$(PY) -m pytest $(XDIST) -m "not slow and not peer"

lint: $(STAMP)
	$(VENV)/bin/ruff check .
	$(VENV)/bin/ruff format --check .
	@# mypy sees the package as installed: a tree of links maps the stage folders into beamaudit
	rm -rf build/typecheck && mkdir -p build/typecheck/beamaudit
	for f in _root/*.py; do ln -s ../../../$$f build/typecheck/beamaudit/; done
	for s in ingest model api dashboards; do ln -s ../../../$$s build/typecheck/beamaudit/$$s; done
	cd build/typecheck && ../../$(VENV)/bin/mypy -p beamaudit

format: $(STAMP)
	$(VENV)/bin/ruff format .
	$(VENV)/bin/ruff check --fix .

## Speed and memory targets, reported as ratios against a baseline measured in the same run.
bench: $(STAMP)
	@set -e; for b in benchmarks/bench_*.py; do echo "== $$b"; $(PY) $$b; done

clean:
	rm -rf build dist *.egg-info .pytest_cache .mypy_cache .ruff_cache artifacts demo-output
