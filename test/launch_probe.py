"""What the launch tests share: a probe node, made once per test class, that records one
launched namespace's ``joint_states`` and ``motor_effort`` (sensor-data QoS), and a bounded spin."""
import os
import time

import rclpy
from rclpy.qos import qos_profile_sensor_data
from sensor_msgs.msg import JointState


def spin_until(node, done, timeout):
    """Spin ``node`` until ``done()`` or ``timeout`` s of wall time; returns done()."""
    end = time.monotonic() + timeout
    while time.monotonic() < end and not done():
        rclpy.spin_once(node, timeout_sec=0.05)
    return done()


class NamespaceProbe:
    """Mixin for a unittest.TestCase of a launch test: ``cls.node`` (named ``probe_name``) and the
    ``states`` and ``commands`` recorded from the namespace that :meth:`listen_to` names first."""

    probe_name = "launch_test_probe"

    @classmethod
    def setUpClass(cls):
        assert os.environ.get("ROS_AUTOMATIC_DISCOVERY_RANGE") == "LOCALHOST"  # network rule
        rclpy.init()
        cls.node = rclpy.create_node(cls.probe_name)
        cls.ns = None
        cls.states, cls.commands = [], []

    @classmethod
    def tearDownClass(cls):
        cls.node.destroy_node()
        rclpy.shutdown()

    def listen_to(self, ns: str) -> str:
        """Subscribe once to ``ns``'s joint_states and motor_effort; returns the namespace listened to."""
        cls = type(self)
        if cls.ns is None:
            cls.ns = ns
            cls.node.create_subscription(JointState, f"/{ns}/joint_states", cls.states.append, qos_profile_sensor_data)
            cls.node.create_subscription(JointState, f"/{ns}/motor_effort", cls.commands.append, qos_profile_sensor_data)
        return cls.ns
