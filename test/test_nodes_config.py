"""Both nodes refuse a misspelt or unknown key given to them, as ``cdamp`` does; both run a URDF
robot given at start (and refuse one named at run time); the simulated joint refuses a broken one.

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

from compliant_damping.control import controller
from compliant_damping.io import config, parameter_keys
from compliant_damping.dynamics.bench_plant import LINK_KEYS
from compliant_damping.nodes import params
from compliant_damping.nodes.controller_node import ControllerNode
from compliant_damping.nodes.simulated_joint_node import SimulatedJointNode
from node_harness import DOC, ros  # noqa: F401 (ros is a fixture)

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


PENDULUM_URI = "package://compliant_damping/urdf/pendulum.urdf"  # one revolute joint, knee


def _robot_parameters(node: str, key: str) -> dict:
    """The bundled knee as a URDF robot: the file's section without the pendulum link's keys, the
    bundled pendulum URDF given under ``key`` (a path or the document itself)."""
    pytest.importorskip("pinocchio", reason="the control below builds the URDF chain with Pinocchio")
    prefix = "knee.model." if node == config.CONTROLLER_NODE else "knee."
    values = {k: v for k, v in config.node_parameters(DOC, node).items()
              if not (k.startswith(prefix) and k[len(prefix):] in LINK_KEYS)}
    pendulum = config.share_dir() / "urdf" / "pendulum.urdf"
    values[key] = pendulum.read_text() if key == "robot_description" else PENDULUM_URI
    build = config.controller_setup if node == config.CONTROLLER_NODE else config.sim_setup
    assert build(values).links.joint_names == ("knee",)  # control: a valid URDF robot offline
    return values


@pytest.mark.parametrize("key", ["nominal_urdf", "robot_description"])
def test_controller_configures_a_urdf_robot(ros, key):
    ctrl = ros.start(ControllerNode, {**_robot_parameters(config.CONTROLLER_NODE, key), "use_sim_time": True})
    assert not ctrl.has_parameter("knee.model.link_inertia")  # the URDF gives the links: drive keys only
    assert ctrl.trigger_configure().name == "SUCCESS"
    assert isinstance(ctrl.bank, controller.RobotController) and ctrl.bank.model.links.joint_names == ("knee",)
    assert ctrl.setup.urdf_source is not None


@pytest.mark.parametrize("key", ["robot_urdf", "robot_description"])
def test_simulated_joint_runs_a_urdf_robot(ros, key):
    """The simulated joint runs the pendulum URDF as the controller does."""
    sim = ros.start(SimulatedJointNode, {**_robot_parameters(config.SIM_NODE, key), "lock_step": True})
    assert sim.setup.links.joint_names == ("knee",) and sim.setup.urdf_source is not None
    assert not sim.has_parameter("knee.link_inertia")  # the URDF gives the links: drive keys only


def test_naming_a_urdf_at_run_time_is_refused(ros):
    """An unconfigured controller validates every change (ROS 2 set-parameters callback): the robot
    decided its keys at start, so a URDF is refused."""
    ctrl = ros.controller()
    result = ctrl.set_parameters([Parameter("nominal_urdf", value=PENDULUM_URI)])[0]
    assert not result.successful
    assert result.reason.startswith("nominal_urdf: fixed after start")
    assert ctrl.get_parameter("nominal_urdf").value == ""
    assert ctrl.trigger_configure().name == "SUCCESS"  # still the built-in knee


def _leg_with(**changes) -> dict:
    """The bundled leg's simulated_joint section (config/compliant_leg.yaml), flat, with ``changes``."""
    return {**config.node_parameters(config.read(config.bundled("compliant_leg.yaml")), config.SIM_NODE), **changes}


def _renamed_ankle() -> dict:
    """The leg's section with its ankle_pitch joint called toe_pitch, a joint the leg's URDF lacks."""
    values = _leg_with()
    values["joint_names"] = ["hip_pitch", "knee_pitch", "toe_pitch"]
    return {k.replace("ankle_pitch.", "toe_pitch."): v for k, v in values.items()}


@pytest.mark.parametrize("values, key, said", [
    (lambda: _leg_with(robot_urdf="", robot_description="<robot name='leg'><link name='base'>"),
     "robot_description", "not a well-formed URDF"),
    (_renamed_ankle, "robot_urdf", "toe_pitch: no such joint in"),
], ids=["robot_description_does_not_parse", "joint_missing_from_the_urdf"])
def test_simulated_joint_executable_refuses_a_broken_robot(tmp_path, values, key, said):
    """The executable exits 2 with the key and the reason, no traceback (as for any parameter error)."""
    pytest.importorskip("pinocchio", reason="the control below builds the leg's URDF chain with Pinocchio")
    assert config.sim_setup(_leg_with()).links.joint_names == ("hip_pitch", "knee_pitch", "ankle_pitch")  # control
    path = tmp_path / "robot.yaml"
    path.write_text(yaml.safe_dump({f"/**/{config.SIM_NODE}": {"ros__parameters": values()}}))
    env = {**os.environ, "PYTHONPATH": os.pathsep.join([os.getcwd(), os.environ.get("PYTHONPATH", "")])}
    run = subprocess.run([sys.executable, "-m", "compliant_damping.nodes.simulated_joint_node", "--ros-args",
                          "--params-file", str(path)], capture_output=True, text=True, timeout=60, env=env)
    print(run.stderr.strip())
    assert run.returncode == 2
    assert f"parameter error: {key}: {said}" in run.stderr
    assert "Traceback" not in run.stderr


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
