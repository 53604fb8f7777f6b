# Two commands do all set-up on a fresh machine: `make demo` and `make test`.
# Every ROS process started from here keeps DDS discovery on the loopback interface.
export ROS_AUTOMATIC_DISCOVERY_RANGE := LOCALHOST
export ROS_LOCALHOST_ONLY := 1
export ROS_DOMAIN_ID := 57
export RMW_IMPLEMENTATION := rmw_fastrtps_cpp

PYTHON ?= python3.11
VENV ?= .venv
PY := $(VENV)/bin/python
STAMP := $(VENV)/.installed

.PHONY: demo test bench soak clean

$(STAMP): requirements.txt setup.py
	@command -v $(PYTHON) >/dev/null || { echo "error: $(PYTHON) not found; the ROS 2 Kilted wheels need CPython 3.11" >&2; exit 1; }
	$(PYTHON) -m venv $(VENV)
	$(PY) -m pip install --quiet --disable-pip-version-check -r requirements.txt
	$(PY) -m pip install --quiet --disable-pip-version-check --no-deps -e .
	touch $@

demo: $(STAMP)
	$(PY) -m compliant_damping.cli demo

test: $(STAMP)
	$(PY) -m pytest

bench: $(STAMP)
	$(PY) benchmarks/simulator_speed.py
	$(PY) benchmarks/node_latency.py

# Not part of bench or test: ten minutes of both nodes at 1 kHz (SOAK_SECONDS to shorten).
SOAK_SECONDS ?= 600
soak: $(STAMP)
	$(PY) benchmarks/soak.py --seconds $(SOAK_SECONDS)

clean:
	rm -rf $(VENV) results .pytest_cache
