# Two commands do all set-up on a fresh machine: `make demo` and `make test`.
# Both create or refresh the local virtual environment in .venv first; `make test` also
# makes .venv-jazzy and runs the DDS tests again there (ROS 2 Jazzy).

PYTHON ?= python3
VENV   ?= .venv
PY     := $(VENV)/bin/python
STAMP  := $(VENV)/.kinematic_monitor-installed
EXTRAS := ros,tools,test,fleet
# a second environment with ROS 2 Jazzy's wheels (long-term support); .venv has the newest
# release's (Kilted). The tests that run rclpy (marker dds) run in both.
VENV_JAZZY   ?= .venv-jazzy
PY_JAZZY     := $(VENV_JAZZY)/bin/python
STAMP_JAZZY  := $(VENV_JAZZY)/.kinematic_monitor-installed
EXTRAS_JAZZY := ros-jazzy,tools,test,fleet

# a failing command in a pipe fails the recipe
SHELL := bash
.SHELLFLAGS := -o pipefail -c

# pip without its noise: the local index's absent folders, and setuptools' editable-install
# banner (a warning whose text starts "Editable installation")
PIP_ENV    := PYTHONWARNINGS="ignore:Editable installation"
PIP_FILTER := { grep -v 'is ignored: it is neither' || true; }

# DDS traffic stays on this machine, and each run gets its own domain so that
# parallel runs never hear each other (ROS 2 domain ids 1..101 are safe on Linux).
export ROS_AUTOMATIC_DISCOVERY_RANGE := LOCALHOST
ROS_DOMAIN_ID ?= $(shell $(PYTHON) -c "import os; print(1 + os.getpid() % 101)")
export ROS_DOMAIN_ID

# core and configuration modules must keep >= 90 % line coverage (REP 2004 quality level 1)
CORE := kinematic_monitor/core/*,kinematic_monitor/core/*/*,kinematic_monitor/config/*

# $(call install_venv,VENV,EXTRAS): create VENV if needed, install the package editable
define install_venv
	@test -x $(1)/bin/python || $(PYTHON) -m venv $(1)
	$(PIP_ENV) $(1)/bin/python -m pip install --quiet --upgrade pip 2>&1 | $(PIP_FILTER)
	$(PIP_ENV) $(1)/bin/python -m pip install --quiet -e '.[$(2)]' 2>&1 | $(PIP_FILTER)
	@$(1)/bin/python -c "import kinematic_monitor" # fail here, not later, if the install did not work
	@touch $(1)/.kinematic_monitor-installed
endef

.PHONY: all venv test test-jazzy lint typecheck demo bench clean

all: test

$(STAMP): setup.py setup.cfg package.xml pyproject.toml
	$(call install_venv,$(VENV),$(EXTRAS))

$(STAMP_JAZZY): setup.py setup.cfg package.xml pyproject.toml
	$(call install_venv,$(VENV_JAZZY),$(EXTRAS_JAZZY))

venv: $(STAMP) $(STAMP_JAZZY)

lint: $(STAMP)
	$(VENV)/bin/ruff check kinematic_monitor test bench launch tools setup.py

typecheck: $(STAMP)
	$(VENV)/bin/mypy
	$(VENV)/bin/mypy --strict --follow-imports=silent kinematic_monitor/core kinematic_monitor/io  # core/ and io/: strict

test: $(STAMP) lint typecheck
	@$(PY) -c "from importlib.metadata import version as v; print('== all tests, rclpy', v('ros-rclpy'))"
	$(PY) -m pytest --cov=kinematic_monitor --cov-report=term $(PYTEST_ARGS)
	$(PY) -m coverage report --include='$(CORE)' --fail-under=90
	@$(MAKE) --no-print-directory test-jazzy

# the tests that run rclpy, against ROS 2 Jazzy's wheels
test-jazzy: $(STAMP_JAZZY)
	@$(PY_JAZZY) -c "from importlib.metadata import version as v; print('== dds tests, rclpy', v('ros-rclpy'), '(Jazzy)')"
	$(PY_JAZZY) -m pytest -m dds $(PYTEST_ARGS)

demo: $(STAMP)
	$(PY) -m kinematic_monitor demo --out build/demo --force

bench: $(STAMP)
	@for b in bench/*.py; do echo "== $$b"; $(PY) $$b || exit 1; done

clean:
	rm -rf $(VENV) $(VENV_JAZZY) build install log *.egg-info .pytest_cache .mypy_cache .ruff_cache .coverage
