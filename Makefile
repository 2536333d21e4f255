# One entry point for set-up, demo, tests and benchmarks. Everything installs into .venv
# from the package registries; nothing needs to be installed by hand.
PYTHON ?= python3
VENV   ?= .venv
PY     := $(VENV)/bin/python
STAMP  := $(VENV)/.installed

# ROS 2 traffic stays on this machine, on a domain of its own (tests set their own as well).
export ROS_AUTOMATIC_DISCOVERY_RANGE := LOCALHOST
export ROS_DOMAIN_ID ?= $(shell $(PYTHON) -c 'import os; print(7 + os.getpid() % 80)')
export RMW_IMPLEMENTATION := rmw_fastrtps_cpp

.PHONY: all setup test demo bench validate clean

all: test

setup: $(STAMP)

$(STAMP): requirements.txt requirements-ros.txt requirements-test.txt setup.py
	$(PYTHON) -m venv $(VENV)
	$(PY) -m pip install --quiet --disable-pip-version-check pip==26.3 setuptools==80.9.0 wheel==0.48.0
	$(PY) -m pip install --quiet -r requirements.txt -r requirements-ros.txt -r requirements-test.txt
	$(PY) -m pip install --quiet --no-deps --no-build-isolation -e .
	$(PY) -m interaction_estimator.core.warmup
	touch $(STAMP)

test: $(STAMP)
	$(PY) -m pytest -q -ra test

# make demo SCENARIO=cabinet_door (revolute), tool_cart_drawer (prismatic), soft_fixture
# (cartesian); default: the storeroom door along an estimated direction
SCENARIO ?= door
demo: $(STAMP)
	$(PY) -m interaction_estimator.demo --out demo_out --scenario $(SCENARIO)

bench: $(STAMP)
	$(PY) test/benchmarks/run_all.py

# Monte-Carlo validation of the object estimates (issue 17): 200 seeded MuJoCo runs on two
# processes, simulations cached by seed under .cache/validation; prints the table.
validate: $(STAMP)
	$(PY) -m interaction_estimator.offline.validation --runs 200 --jobs 2

clean:
	rm -rf $(VENV) build *.egg-info demo_out .pytest_cache
