"""Bundled parameter files reach the nodes in any namespace; each node logs one start-up line.

Outside reference: ROS 2's parameter-file matching (rcl_yaml_param_parser, "Setting parameters
from a YAML file" in the ROS 2 docs): a section keyed by a bare node name only matches that node
in the root namespace, a ``/**/name`` section matches ``name`` in every namespace. The first test
shows the bare-name rule with rclpy itself, so the checks on the bundled files can fail.
"""
import os
import signal
import subprocess
import sys
import threading
import time

import pytest
import yaml

rclpy = pytest.importorskip("rclpy", reason="node tests need rclpy")

from rclpy.context import Context  # noqa: E402
from rclpy.exceptions import ParameterUninitializedException  # noqa: E402
from rclpy.executors import SingleThreadedExecutor  # noqa: E402
from lifecycle_msgs.msg import Transition  # noqa: E402
from lifecycle_msgs.srv import ChangeState  # noqa: E402

from compliant_damping.io import config  # noqa: E402
from compliant_damping.nodes.controller_node import ControllerNode  # noqa: E402
from compliant_damping.nodes.simulated_joint_node import SimulatedJointNode  # noqa: E402
from compliant_damping.nodes.startup import params_files, start_line  # noqa: E402

pytestmark = pytest.mark.ros

NS = f"/cdamp_ns_{os.getpid()}/arm"
CONTROLLER_FILES = ("one_joint.yaml", "three_joints.yaml", "hardware_template.yaml")
FULL_FILES = ("one_joint.yaml", "three_joints.yaml")


@pytest.fixture
def context():
    ctx = Context()
    rclpy.init(args=[], context=ctx)
    yield ctx
    rclpy.shutdown(context=ctx)


def _section(path, node):
    """The ros__parameters of ``node`` in the file, read with plain YAML."""
    return yaml.safe_load(path.read_text())[f"/**/{node}"]["ros__parameters"]


def test_bare_node_name_section_does_not_apply_in_a_namespace(context, tmp_path):
    bare = tmp_path / "bare.yaml"
    bare.write_text(f"{config.CONTROLLER_NODE}:\n  ros__parameters:\n    joint_names: [knee]\n")
    node = ControllerNode(context=context, namespace=NS, cli_args=["--ros-args", "--params-file", str(bare)])
    try:
        with pytest.raises(ParameterUninitializedException):
            node.get_parameter("joint_names").value
    finally:
        node.destroy_node()


@pytest.mark.parametrize("name", CONTROLLER_FILES)
def test_controller_gets_the_bundled_file_in_a_namespace(context, name):
    path = config.bundled(name)
    node = ControllerNode(context=context, namespace=NS, cli_args=["--ros-args", "--params-file", str(path)])
    try:
        expected = _section(path, config.CONTROLLER_NODE)
        assert node.get_fully_qualified_name() == f"{NS}/{config.CONTROLLER_NODE}"
        assert list(node.get_parameter("joint_names").value) == expected["joint_names"]
        assert node.get_parameter("law").value == expected["law"]
        joint = expected["joint_names"][0]
        assert node.get_parameter(f"{joint}.limits.torque").value == expected[joint]["limits"]["torque"]
    finally:
        node.destroy_node()


@pytest.mark.parametrize("name", FULL_FILES)
def test_simulated_joint_gets_the_bundled_file_in_a_namespace(context, name):
    path = config.bundled(name)
    node = SimulatedJointNode(context=context, namespace=NS, cli_args=["--ros-args", "--params-file", str(path)])
    try:
        expected = _section(path, config.SIM_NODE)
        assert list(node.setup.joint_names) == expected["joint_names"]
        joint = expected["joint_names"][0]
        assert node.get_parameter(f"{joint}.spring_stiffness").value == expected[joint]["spring_stiffness"]
    finally:
        node.destroy_node()


def test_params_files_reads_only_ros_args_sections():
    # ROS 2 command-line rules (ROS 2 docs, "Passing ROS arguments to nodes via the command-line"):
    # ROS arguments sit between --ros-args and an optional --; the same flag outside is the program's.
    argv = ["node", "--params-file", "mine.yaml", "--ros-args", "--params-file", "a.yaml", "-r", "__ns:=/x",
            "--params-file", "b.yaml", "--", "--params-file", "c.yaml", "--ros-args", "--params-file", "d.yaml"]
    assert params_files(argv) == ["a.yaml", "b.yaml", "d.yaml"]
    assert params_files(["node", "--ros-args", "--params-file"]) == []


def test_start_line_names_files_law_and_joints():
    assert start_line(["a.yaml", "b.yaml"], ["hip", "knee"], "motor_pd") == \
        "parameter file(s) a.yaml, b.yaml; law motor_pd; joints hip, knee"
    assert start_line([], ["knee"]) == "parameter file(s) none (overrides and defaults only); joints knee"


class Child:
    """A node as a child process; its merged stdout/stderr lines are collected by a thread."""

    def __init__(self, module, ns, path):
        env = {**os.environ, "RCUTILS_LOGGING_BUFFERED_STREAM": "0"}
        self.proc = subprocess.Popen([sys.executable, "-m", f"compliant_damping.nodes.{module}", "--ros-args",
                                      "--params-file", str(path), "-r", f"__ns:={ns}", "-r", f"/diagnostics:={ns}/diagnostics"],
                                     stdout=subprocess.PIPE, stderr=subprocess.STDOUT, text=True, env=env)
        self.lines = []
        threading.Thread(target=lambda: self.lines.extend(self.proc.stdout), daemon=True).start()

    def wait_for(self, text, timeout):
        end = time.monotonic() + timeout
        while time.monotonic() < end and not any(text in ln for ln in self.lines):
            time.sleep(0.05)
        return [ln for ln in self.lines if text in ln]

    def stop(self):
        if self.proc.poll() is None:
            self.proc.send_signal(signal.SIGINT)
        return self.proc.wait(timeout=20)


def test_each_node_logs_one_start_line(context):
    path = config.bundled("one_joint.yaml")
    ns = f"/cdamp_start_{os.getpid()}"
    sim, ctrl = Child("simulated_joint_node", ns, path), Child("controller_node", ns, path)
    node = rclpy.create_node("start_line_probe", context=context)
    try:
        sim_lines = sim.wait_for("parameter file(s)", 30.0)
        client = node.create_client(ChangeState, f"{ns}/{config.CONTROLLER_NODE}/change_state")
        assert client.wait_for_service(timeout_sec=30.0), "controller has no change_state service"
        future = client.call_async(ChangeState.Request(transition=Transition(id=Transition.TRANSITION_CONFIGURE)))
        executor = SingleThreadedExecutor(context=context)
        executor.add_node(node)
        executor.spin_until_future_complete(future, timeout_sec=30.0)
        assert future.done() and future.result().success, "configure refused"
        ctrl_lines = ctrl.wait_for("parameter file(s)", 30.0)
    finally:
        node.destroy_node()
        codes = sim.stop(), ctrl.stop()
    assert codes == (0, 0), sim.lines + ctrl.lines
    assert len(sim_lines) == 1 and sim_lines[0].rstrip().endswith(start_line([str(path)], ["knee"])), sim.lines
    assert len(ctrl_lines) == 1, ctrl.lines
    assert ctrl_lines[0].rstrip().endswith(start_line([str(path)], ["knee"], "decoupled_damper")), ctrl.lines
    assert f"[{ns[1:]}.{config.SIM_NODE}]" in sim_lines[0]  # rcutils logger name: namespace.node
