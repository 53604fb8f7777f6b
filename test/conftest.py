"""Test-wide guards: DDS discovery stays on loopback, and an empty run fails."""
import os

import pytest

# Network rule: every ROS process these tests start keeps discovery on loopback with a fixed domain.
REQUIRED_ENV = {"ROS_AUTOMATIC_DISCOVERY_RANGE": "LOCALHOST", "ROS_LOCALHOST_ONLY": "1"}


def pytest_configure(config):
    wrong = {k: os.environ.get(k) for k, v in REQUIRED_ENV.items() if os.environ.get(k) != v}
    if wrong or not os.environ.get("ROS_DOMAIN_ID", "").isdigit():
        raise pytest.UsageError(
            "refusing to run: set ROS_AUTOMATIC_DISCOVERY_RANGE=LOCALHOST, ROS_LOCALHOST_ONLY=1 and a fixed "
            f"ROS_DOMAIN_ID (use `make test`); found {wrong or os.environ.get('ROS_DOMAIN_ID')!r}")


def pytest_sessionfinish(session, exitstatus):
    if exitstatus == pytest.ExitCode.NO_TESTS_COLLECTED:
        session.exitstatus = pytest.ExitCode.TESTS_FAILED
