"""The suite's loopback guard (conftest.py): sets the discovery variables when unset, refuses others.

Reference: the ROS 2 docs ("Improved Dynamic Discovery"): ROS_AUTOMATIC_DISCOVERY_RANGE=LOCALHOST
keeps discovery on the host (Iron and later); ROS_LOCALHOST_ONLY=1 does so on older distributions;
ROS_DOMAIN_ID is a number (0-232 on Linux). A child pytest run with a scrubbed environment
shows that plain ``pytest`` (as ``colcon test`` calls it) passes the values on to its own children.
"""
import os
import re
import shutil
import subprocess
import sys
from pathlib import Path

import pytest

from conftest import loopback_environment

HERE = Path(__file__).resolve().parent
NETWORK = ("ROS_AUTOMATIC_DISCOVERY_RANGE", "ROS_LOCALHOST_ONLY", "ROS_DOMAIN_ID")
CHILD_TEST = """
import subprocess, sys
def test_child_sees_loopback():
    out = subprocess.run([sys.executable, "-c", "import os; print(os.environ['ROS_AUTOMATIC_DISCOVERY_RANGE'], "
                          "os.environ['ROS_LOCALHOST_ONLY'], os.environ['ROS_DOMAIN_ID'])"],
                         capture_output=True, text=True, check=True)
    assert out.stdout.split() == {expected!r}
"""


def test_unset_variables_get_loopback_values():
    assert loopback_environment({}) == {"ROS_AUTOMATIC_DISCOVERY_RANGE": "LOCALHOST", "ROS_LOCALHOST_ONLY": "1",
                                        "ROS_DOMAIN_ID": "57"}
    assert loopback_environment({"ROS_DOMAIN_ID": "61"}) == {"ROS_AUTOMATIC_DISCOVERY_RANGE": "LOCALHOST",
                                                              "ROS_LOCALHOST_ONLY": "1"}
    assert loopback_environment(dict(ROS_AUTOMATIC_DISCOVERY_RANGE="LOCALHOST", ROS_LOCALHOST_ONLY="1",
                                     ROS_DOMAIN_ID="3")) == {}


@pytest.mark.parametrize("env", [{"ROS_AUTOMATIC_DISCOVERY_RANGE": "SUBNET"}, {"ROS_LOCALHOST_ONLY": "0"},
                                 {"ROS_DOMAIN_ID": ""}, {"ROS_DOMAIN_ID": "lab"}])
def test_values_that_leave_loopback_are_refused(env):
    with pytest.raises(pytest.UsageError, match=next(iter(env))):
        loopback_environment(env)


def _child_pytest(tmp_path, extra_env, expected):
    (tmp_path / "test_child.py").write_text(CHILD_TEST.format(expected=expected))
    # a clean child run: no discovery variables, none of the parent's options (colcon test sets PYTEST_ADDOPTS)
    env = {k: v for k, v in os.environ.items() if k not in (*NETWORK, "PYTEST_ADDOPTS")}
    env.update(extra_env, PYTHONPATH=os.pathsep.join([str(HERE), env.get("PYTHONPATH", "")]))
    return subprocess.run([sys.executable, "-m", "pytest", "-p", "conftest", "-q", "-p", "no:cacheprovider",
                           str(tmp_path / "test_child.py")], cwd=tmp_path, env=env, capture_output=True, text=True,
                          timeout=120)


def test_plain_pytest_without_variables_runs_on_loopback(tmp_path):
    out = _child_pytest(tmp_path, {}, ["LOCALHOST", "1", "57"])
    assert out.returncode == 0, out.stdout + out.stderr


def test_plain_pytest_keeps_a_given_domain(tmp_path):
    out = _child_pytest(tmp_path, {"ROS_DOMAIN_ID": "23"}, ["LOCALHOST", "1", "23"])
    assert out.returncode == 0, out.stdout + out.stderr


def test_plain_pytest_refuses_a_wide_range(tmp_path):
    out = _child_pytest(tmp_path, {"ROS_AUTOMATIC_DISCOVERY_RANGE": "SUBNET"}, [])
    assert out.returncode == pytest.ExitCode.USAGE_ERROR and "refusing to run" in out.stderr, out.stdout + out.stderr


@pytest.mark.parametrize("given, expected", [(None, "57"), ("23", "23")])
def test_makefile_keeps_the_users_domain(given, expected, tmp_path):
    """GNU make manual, "Setting Variables": ``?=`` assigns only when the variable (environment
    included) is undefined; the loopback variables are forced with ``:=`` whatever the user set."""
    if shutil.which("make") is None:
        pytest.skip("make is not installed")
    env = {k: v for k, v in os.environ.items() if k not in NETWORK}
    env.update({"ROS_LOCALHOST_ONLY": "0"} if given is None else {"ROS_DOMAIN_ID": given})
    out = subprocess.run(["make", "-pn", "-f", str(HERE.parent / "Makefile"), "clean"], cwd=tmp_path, env=env,
                         capture_output=True, text=True, timeout=60, check=True)
    values = dict(re.findall(r"^(ROS_\w+) :?= (\S+)$", out.stdout, re.MULTILINE))
    assert values["ROS_DOMAIN_ID"] == expected
    assert values["ROS_LOCALHOST_ONLY"] == "1" and values["ROS_AUTOMATIC_DISCOVERY_RANGE"] == "LOCALHOST"
