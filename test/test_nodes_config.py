"""Both nodes refuse a misspelt or unknown key given to them, as ``cdamp`` does.

rcl keeps every value a parameter file or ``parameter_overrides`` gives a node, declared or
not (ROS 2 parameter rules: overrides are per node name, independent of declaration); the nodes
must look at all of them. The did-you-mean is difflib's closest known key (Python standard
library, ``get_close_matches``).
"""
import difflib
import os
import subprocess
import sys

import pytest
import yaml
from rclpy.parameter import Parameter

from compliant_damping import config, parameter_keys
from compliant_damping.nodes import params
from node_harness import ros  # noqa: F401 (ros is a fixture)

pytestmark = pytest.mark.ros

CONTROLLER_KEYS = [s.key for s in parameter_keys.parameter_specs(config.CONTROLLER_NODE, ["knee"])]


def test_difflib_picks_the_intended_key():
    """The reference itself: the misspelling below is closest to the key the user meant."""
    pool = [k for k in CONTROLLER_KEYS if k.startswith("knee.")]
    assert difflib.get_close_matches("knee.limits.position_uper", pool, n=1) == ["knee.limits.position_upper"]


def test_controller_with_a_misspelt_limit_constructs_then_refuses_to_configure(ros, capfd):
    ctrl = ros.controller(knee__limits__position_uper=0.5)
    assert ctrl.trigger_configure().name == "FAILURE"
    assert ctrl.bank is None  # nothing was built: no publisher, no timer
    log = capfd.readouterr().err
    assert "cannot configure: knee.limits.position_uper: unknown key" in log
    assert "did you mean knee.limits.position_upper?" in log


def test_controller_with_every_key_spelt_right_configures(ros):
    """Control for the test above: the same node with the intended key configures and keeps it."""
    ctrl = ros.controller(knee__limits__position_upper=0.5)
    assert ctrl.trigger_configure().name == "SUCCESS"
    assert ctrl.setup.joints[0].limits.position_upper == 0.5


def test_controller_refuses_a_key_for_a_joint_it_does_not_drive(ros, capfd):
    ctrl = ros.controller(hip__limits__torque=10.0)
    assert ctrl.trigger_configure().name == "FAILURE"
    assert "hip.limits.torque: unknown key" in capfd.readouterr().err


def test_simulated_joint_refuses_to_start_with_a_misspelt_stop(ros):
    with pytest.raises(config.ConfigError) as info:
        ros.simulated_joint(knee__stop_uper=0.5)
    assert info.value.key == "knee.stop_uper"
    assert "did you mean knee.stop_upper?" in info.value.reason


def test_rclpy_own_parameters_are_not_unknown(ros):
    """use_sim_time is rclpy's (the harness gives it to the controller); it is no key of ours."""
    ctrl = ros.controller()
    assert ctrl.trigger_configure().name == "SUCCESS"
    assert ctrl.get_parameter("use_sim_time").value is True


def test_a_given_unknown_key_cannot_be_set_at_run_time(ros):
    """A given unknown key is declared, so a set reaches the callbacks; unknown_keys refuses it."""
    sim = ros.simulated_joint(knee__stop_upper=0.8)
    assert params.unknown_keys(sim, config.SIM_NODE, [Parameter("knee.stop_upper", value=0.5)]) is None
    reason = params.unknown_keys(sim, config.SIM_NODE, [Parameter("knee.stop_uper", value=0.5)])
    assert reason.startswith("knee.stop_uper: unknown key in simulated_joint; did you mean knee.stop_upper?")


@pytest.mark.parametrize("module", ["controller_node", "simulated_joint_node"])
def test_node_executable_reports_a_yaml_error_with_line_and_column(tmp_path, module):
    """rcl refuses the file at init; the node prints PyYAML's position (1-based) and exits 2."""
    path = tmp_path / "broken.yaml"
    path.write_text(f"{config.SIM_NODE}:\n  ros__parameters:\n    joint_names: [knee\n    seed: 0\n")
    with pytest.raises(yaml.MarkedYAMLError) as raw:  # the reference: PyYAML's problem mark, 0-based
        yaml.safe_load(path.read_text())
    mark = raw.value.problem_mark
    env = {**os.environ, "PYTHONPATH": os.pathsep.join([os.getcwd(), os.environ.get("PYTHONPATH", "")])}
    run = subprocess.run([sys.executable, "-m", f"compliant_damping.nodes.{module}", "--ros-args",
                          "--params-file", str(path)], capture_output=True, text=True, timeout=60, env=env)
    assert run.returncode == 2
    assert f"parameter error: {path}:{mark.line + 1}:{mark.column + 1}: " in run.stderr
    assert "Traceback" not in run.stderr
