"""Test-wide guards: DDS discovery stays on loopback, and an empty run fails."""
import os

import pytest

# Network rule: every ROS process these tests start keeps discovery on loopback with a fixed domain.
LOOPBACK_ENV = {"ROS_AUTOMATIC_DISCOVERY_RANGE": "LOCALHOST", "ROS_LOCALHOST_ONLY": "1"}
DEFAULT_DOMAIN_ID = "57"  # the Makefile's default; any fixed id the user exports is kept


def loopback_environment(env) -> dict:
    """The discovery variables to add to ``env`` so that ROS stays on loopback.

    Unset variables get the loopback values (and domain 57); a variable already set to a value
    that leaves loopback, or a ROS_DOMAIN_ID that is not a number, raises ``pytest.UsageError``.
    """
    wanted = {**LOOPBACK_ENV, "ROS_DOMAIN_ID": DEFAULT_DOMAIN_ID}
    wrong = {k: env[k] for k, v in LOOPBACK_ENV.items() if env.get(k, v) != v}
    if not env.get("ROS_DOMAIN_ID", DEFAULT_DOMAIN_ID).isdigit():
        wrong["ROS_DOMAIN_ID"] = env["ROS_DOMAIN_ID"]
    if wrong:
        raise pytest.UsageError(
            f"refusing to run: {wrong} would let DDS discovery leave the loopback interface or drift between "
            "domains; unset them or set ROS_AUTOMATIC_DISCOVERY_RANGE=LOCALHOST, ROS_LOCALHOST_ONLY=1 and a "
            "numeric ROS_DOMAIN_ID")
    return {k: v for k, v in wanted.items() if k not in env}


def pytest_configure(config):
    # Set before any test imports rclpy; child processes inherit os.environ.
    os.environ.update(loopback_environment(os.environ))


def pytest_sessionfinish(session, exitstatus):
    if exitstatus == pytest.ExitCode.NO_TESTS_COLLECTED:
        session.exitstatus = pytest.ExitCode.TESTS_FAILED
