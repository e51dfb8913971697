# Two commands do all set-up on a fresh machine: `make demo` and `make test`.
# Both create or refresh the local virtual environment in .venv first.

PYTHON ?= python3
VENV   ?= .venv
PY     := $(VENV)/bin/python
STAMP  := $(VENV)/.kinematic_monitor-installed
EXTRAS := ros,tools,test,fleet

# DDS traffic stays on this machine, and each run gets its own domain so that
# parallel runs never hear each other (ROS 2 domain ids 1..101 are safe on Linux).
export ROS_AUTOMATIC_DISCOVERY_RANGE := LOCALHOST
ROS_DOMAIN_ID ?= $(shell $(PYTHON) -c "import os; print(1 + os.getpid() % 101)")
export ROS_DOMAIN_ID

# core and configuration modules must keep >= 90 % line coverage (REP 2004 quality level 1)
CORE := kinematic_monitor/core/*,kinematic_monitor/core/*/*,kinematic_monitor/config/*

.PHONY: all venv test lint typecheck demo bench clean

all: test

$(STAMP): setup.py setup.cfg package.xml pyproject.toml
	@test -x $(PY) || $(PYTHON) -m venv $(VENV)
	$(PY) -m pip install --quiet --upgrade pip 2>&1 | { grep -v 'is ignored: it is neither' || true; }
	$(PY) -m pip install --quiet -e '.[$(EXTRAS)]' 2>&1 | { grep -v 'is ignored: it is neither' || true; }
	@$(PY) -c "import kinematic_monitor" # fail here, not later, if the install did not work
	@touch $(STAMP)

venv: $(STAMP)

lint: $(STAMP)
	$(VENV)/bin/ruff check kinematic_monitor test bench launch tools setup.py

typecheck: $(STAMP)
	$(VENV)/bin/mypy
	$(VENV)/bin/mypy --strict --follow-imports=silent kinematic_monitor/io  # io/: strict

test: $(STAMP) lint typecheck
	$(PY) -m pytest --cov=kinematic_monitor --cov-report=term $(PYTEST_ARGS)
	$(PY) -m coverage report --include='$(CORE)' --fail-under=90

demo: $(STAMP)
	$(PY) -m kinematic_monitor demo --out build/demo --force

bench: $(STAMP)
	@for b in bench/*.py; do echo "== $$b"; $(PY) $$b || exit 1; done

clean:
	rm -rf $(VENV) build install log *.egg-info .pytest_cache .mypy_cache .ruff_cache .coverage
