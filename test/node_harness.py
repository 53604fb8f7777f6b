"""In-process ROS harness: both nodes and a probe node in one executor, on a fresh rclpy Context.

The controller runs on sim time; the simulated joint in lock step, so a run is deterministic.
Every wait is ``spin_until`` with a deadline. All nodes live in a namespace of their own, with
/clock and /diagnostics remapped into it, so runs sharing the domain do not hear each other.
"""
from __future__ import annotations

import itertools
import os
import time

import pytest
import rclpy
from builtin_interfaces.msg import Time
from diagnostic_msgs.msg import DiagnosticArray
from rclpy.context import Context
from rclpy.executors import SingleThreadedExecutor
from rclpy.parameter import Parameter
from rclpy.qos import QoSProfile
from rosgraph_msgs.msg import Clock
from sensor_msgs.msg import JointState
from trajectory_msgs.msg import JointTrajectory
from std_msgs.msg import Float64MultiArray
from std_srvs.srv import Trigger

from compliant_damping.io import config
from compliant_damping.nodes.controller_node import ControllerNode
from compliant_damping.nodes.simulated_joint_node import SimulatedJointNode

DOC = config.read(config.bundled())
_RUNS = itertools.count()


def isolation() -> dict:
    """Node keyword arguments: a fresh namespace, /clock and /diagnostics remapped into it."""
    ns = f"/cdamp_test_{os.getpid()}_{next(_RUNS)}"
    return {"namespace": ns, "cli_args": ["--ros-args", "-r", f"/clock:={ns}/clock",
                                          "-r", f"/diagnostics:={ns}/diagnostics"]}


def stamp(t: float) -> Time:
    ns = round(t * 1e9)
    return Time(sec=ns // 1_000_000_000, nanosec=ns % 1_000_000_000)


def seconds(msg_stamp) -> float:
    return msg_stamp.sec + msg_stamp.nanosec * 1e-9


class Probe:
    """Test node: records motor_effort, joint_states and /diagnostics; publishes what a test needs."""

    def __init__(self, context, scope: dict):
        self.node = rclpy.create_node("test_probe", context=context, **scope)
        reliable = QoSProfile(depth=100)
        self.efforts, self.states, self.diagnostics, self.arrays = [], [], [], []
        self.node.create_subscription(Float64MultiArray, "motor_effort_array", self.arrays.append, reliable)
        self.node.create_subscription(JointState, "motor_effort", self.efforts.append, reliable)
        self.node.create_subscription(JointState, "joint_states", self.states.append, reliable)
        self.node.create_subscription(DiagnosticArray, "/diagnostics", self.diagnostics.append, 10)
        self.reference = self.node.create_publisher(JointState, "link_reference", reliable)
        self.trajectory = self.node.create_publisher(JointTrajectory, "link_trajectory", reliable)
        self.joint_states = self.node.create_publisher(JointState, "joint_states", reliable)
        self.clock = self.node.create_publisher(Clock, "/clock", 10)
        self.impulse = self.node.create_publisher(JointState, "external_impulse", reliable)

    def trigger(self, harness, service: str):
        """Call a std_srvs/Trigger service of the controller; returns the response."""
        client = self.node.create_client(Trigger, f"{self.node.get_namespace()}/{config.CONTROLLER_NODE}/{service}")
        assert harness.spin_until(client.service_is_ready, 5.0), f"{service} not available"
        future = client.call_async(Trigger.Request())
        assert harness.spin_until(future.done, 5.0), f"{service} gave no answer"
        self.node.destroy_client(client)
        return future.result()


class Harness:
    def __init__(self, context):
        self.context = context
        self.executor = SingleThreadedExecutor(context=context)
        self.nodes = []
        self.scope = isolation()
        self.probe = Probe(context, self.scope)
        self._add(self.probe.node)

    def _add(self, node):
        self.executor.add_node(node)
        self.nodes.append(node)
        return node

    def controller(self, **overrides) -> ControllerNode:
        """Controller with the bundled parameters, ``overrides`` (dotted keys via '__' in names), on sim time
        unless ``use_sim_time=False`` is among them."""
        values = {**config.node_parameters(DOC, config.CONTROLLER_NODE), "use_sim_time": True, **_dotted(overrides)}
        return self.start(ControllerNode, values)

    def simulated_joint(self, **overrides) -> SimulatedJointNode:
        values = {**config.node_parameters(DOC, config.SIM_NODE), "lock_step": True, **_dotted(overrides)}
        return self.start(SimulatedJointNode, values)

    def start(self, node_class, values: dict):
        """A ``node_class`` in this harness given exactly the parameters ``values`` (dotted keys)."""
        return self._add(node_class(context=self.context, parameter_overrides=_params(values), **self.scope))

    def spin_until(self, condition, timeout: float = 10.0) -> bool:
        deadline = time.monotonic() + timeout
        while not condition():
            if time.monotonic() > deadline:
                return False
            self.executor.spin_once(timeout_sec=0.01)
        return True

    def spin_for(self, seconds_wall: float) -> None:
        deadline = time.monotonic() + seconds_wall
        while time.monotonic() < deadline:
            self.executor.spin_once(timeout_sec=0.01)

    def publish_when_heard(self, publisher, msg, timeout: float = 5.0) -> None:
        """Publish once some subscriber is matched (reliable QoS then delivers)."""
        assert self.spin_until(lambda: publisher.get_subscription_count() > 0, timeout), "no subscriber"
        publisher.publish(msg)

    def close(self):
        self.executor.shutdown()
        for node in self.nodes:
            node.destroy_node()


def _dotted(overrides: dict) -> dict:
    return {k.replace("__", "."): v for k, v in overrides.items()}


def _params(values: dict) -> list:
    return [Parameter(k, value=v) for k, v in values.items()]


@pytest.fixture
def ros():
    """A Harness on a fresh rclpy Context, shut down afterwards."""
    context = Context()
    rclpy.init(context=context)
    harness = Harness(context)
    try:
        yield harness
    finally:
        harness.close()
        rclpy.try_shutdown(context=context)
