# Two commands do all set-up on a fresh machine: `make demo` and `make test`.
# Every ROS process started from here keeps DDS discovery on the loopback interface; the domain id
# is the user's own ROS_DOMAIN_ID when exported (make test ROS_DOMAIN_ID=61 works too), else 57.
export ROS_AUTOMATIC_DISCOVERY_RANGE := LOCALHOST
export ROS_LOCALHOST_ONLY := 1
export ROS_DOMAIN_ID ?= 57
export RMW_IMPLEMENTATION := rmw_fastrtps_cpp

PYTHON ?= python3.11
VENV ?= .venv
PY := $(VENV)/bin/python
# Second environment: ROS 2 Jazzy wheels on CPython 3.12 (Jazzy's reference platform runs 3.12):
# python3.12 from PATH, else a pyenv-installed 3.12 that pyenv has not made global
ifeq ($(origin PYTHON_JAZZY),undefined)
PYTHON_JAZZY := $(or $(shell python3.12 -c 'import sys; print(sys.executable)' 2>/dev/null),$(shell \
  PYENV_VERSION=$$(pyenv versions --bare 2>/dev/null | grep '^3\.12' | tail -n 1) \
  python3.12 -c 'import sys; print(sys.executable)' 2>/dev/null),python3.12)
endif
VENV_JAZZY ?= .venv-jazzy

.PHONY: demo test test-jazzy bench soak clean

# $(call venv,PYTHON,VENV,REQUIREMENTS,DISTRIBUTION): a venv with the pinned wheels and the package
define venv
	@$(1) -c pass 2>/dev/null || { echo "error: $(1) does not run; the pinned ROS 2 $(4) wheels need it" >&2; exit 1; }
	$(1) -m venv $(2)
	$(2)/bin/python -m pip install --quiet --disable-pip-version-check -r $(3)
	$(2)/bin/python -m pip install --quiet --disable-pip-version-check --no-deps -e .
	touch $@
endef

$(VENV)/.installed: requirements.txt requirements-common.txt setup.py
	$(call venv,$(PYTHON),$(VENV),requirements.txt,Kilted)

$(VENV_JAZZY)/.installed: requirements-jazzy.txt requirements-common.txt setup.py
	$(call venv,$(PYTHON_JAZZY),$(VENV_JAZZY),requirements-jazzy.txt,Jazzy)

demo: $(VENV)/.installed
	$(PY) -m compliant_damping.cli demo

test: $(VENV)/.installed
	$(PY) -m pytest

test-jazzy: $(VENV_JAZZY)/.installed
	$(VENV_JAZZY)/bin/python -m pytest

bench: $(VENV)/.installed
	$(PY) benchmarks/simulator_speed.py
	$(PY) benchmarks/law_tick_cost.py
	$(PY) benchmarks/robot_speed.py
	$(PY) benchmarks/node_latency.py
	$(PY) benchmarks/link_dynamics_cost.py

# Not part of bench or test: ten minutes of both nodes at 1 kHz (SOAK_SECONDS to shorten).
SOAK_SECONDS ?= 600
soak: $(VENV)/.installed
	$(PY) benchmarks/soak.py --seconds $(SOAK_SECONDS)

clean:
	rm -rf $(VENV) $(VENV_JAZZY) results .pytest_cache
