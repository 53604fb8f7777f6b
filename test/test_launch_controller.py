"""Launch test of launch/controller.launch.py: the controller alone, fed fake joint states.

Two copies run from config/hardware_template.yaml in their own namespaces: one with
auto_activate:=true, one with the default (false). The test plays the hardware driver: it
publishes joint states at 500 Hz with the link at rest at q = 0 and the motor at theta = 0.01 rad.
Checks:

* the default copy stays unconfigured and silent until the test configures and activates it
  through the standard lifecycle services; then it commands like the other copy;
* the commanded torque is the template's motor PD law by hand (collocated PD with gravity
  compensation, Tomei 1991): theta_d = q_d + g(q_d)/k = 0 with the reference held at the first
  measured q = 0 and no gravity, so tau = K (theta_d - theta) - D theta' = 20.0 * (0 - 0.01)
  = -0.2 N m, well inside the template's 2 N m torque limit.

The watchdog is relaxed to 5 s through the launch file's layer_file argument, so that a loaded
test machine cannot trip it between the test's spins. Skipped without the launch packages;
needs the package's executables on the ament index (colcon workspace). launch_testing's pytest
plugin does not load under pytest 9 (a removed hook argument): use pytest < 9 or ``launch_test FILE``.
"""
import os
import tempfile
import time
import unittest
import uuid
from pathlib import Path

import pytest

pytest.importorskip("launch_testing", reason="launch tests need the ROS 2 launch packages (launch_testing)")
pytest.importorskip("launch_ros", reason="launch tests need the ROS 2 launch packages (launch_ros)")

import launch  # noqa: E402
import launch_testing.actions  # noqa: E402
import launch_testing.asserts  # noqa: E402
import rclpy  # noqa: E402
from launch.launch_description_sources import PythonLaunchDescriptionSource  # noqa: E402
from lifecycle_msgs.msg import State, Transition  # noqa: E402
from lifecycle_msgs.srv import ChangeState, GetState  # noqa: E402
from rclpy.qos import qos_profile_sensor_data  # noqa: E402
from sensor_msgs.msg import JointState  # noqa: E402

ROOT = Path(__file__).resolve().parent.parent
LAUNCH_FILE = ROOT / "launch" / "controller.launch.py"
TEMPLATE = ROOT / "config" / "hardware_template.yaml"
RUN = uuid.uuid4().hex[:8]
AUTO, MANUAL = f"launch_test_auto_{RUN}", f"launch_test_manual_{RUN}"
THETA = 0.01           # rad, fake motor position; the link is at q = 0
K_MOTOR = 20.0         # N m/rad, joint_1.gains.motor_stiffness of the template
EXPECTED = -K_MOTOR * THETA  # N m


@pytest.mark.launch
@pytest.mark.launch_test
def generate_test_description():
    layer = Path(tempfile.mkdtemp(prefix="cdamp_launch_test_")) / "relaxed_watchdog.yaml"
    layer.write_text("damping_controller:\n  ros__parameters:\n    watchdog_timeout: 5.0\n")
    # Scoped groups: launch arguments of one include must not leak into the other.
    copies = [launch.actions.GroupAction(scoped=True, actions=[launch.actions.IncludeLaunchDescription(
        PythonLaunchDescriptionSource(str(LAUNCH_FILE)),
        launch_arguments={"params_file": str(TEMPLATE), "layer_file": str(layer), "namespace": ns,
                          **extra}.items())])
        for ns, extra in ((AUTO, {"auto_activate": "true"}), (MANUAL, {}))]
    return launch.LaunchDescription([*copies, launch_testing.actions.ReadyToTest()])


class TestControllerLaunch(unittest.TestCase):
    @classmethod
    def setUpClass(cls):
        assert os.environ.get("ROS_AUTOMATIC_DISCOVERY_RANGE") == "LOCALHOST"  # network rule
        rclpy.init()
        cls.node = rclpy.create_node("launch_test_driver")
        cls.commands = {AUTO: [], MANUAL: []}
        cls.feeds = []
        for ns, received in cls.commands.items():
            cls.node.create_subscription(JointState, f"/{ns}/motor_effort", received.append, qos_profile_sensor_data)
            cls.feeds.append(cls.node.create_publisher(JointState, f"/{ns}/joint_states", qos_profile_sensor_data))
        cls.node.create_timer(0.002, cls.feed)

    @classmethod
    def feed(cls):
        msg = JointState(name=["joint_1", "joint_1_motor"], position=[0.0, THETA], velocity=[0.0, 0.0])
        msg.header.stamp = cls.node.get_clock().now().to_msg()
        for pub in cls.feeds:
            pub.publish(msg)

    @classmethod
    def tearDownClass(cls):
        cls.node.destroy_node()
        rclpy.shutdown()

    def spin_until(self, done, timeout):
        end = time.monotonic() + timeout
        while time.monotonic() < end and not done():
            rclpy.spin_once(self.node, timeout_sec=0.05)
        return done()

    def call(self, srv_type, name, request):
        client = self.node.create_client(srv_type, name)
        self.assertTrue(client.wait_for_service(timeout_sec=20.0), f"no service {name}")
        future = client.call_async(request)
        self.assertTrue(self.spin_until(future.done, 20.0), f"no answer from {name}")
        return future.result()

    def assert_commands(self, ns):
        received = self.commands[ns]
        self.assertTrue(self.spin_until(lambda: len(received) > 200, 30.0), f"{len(received)} commands from {ns}")
        last = received[-50:]
        self.assertEqual({tuple(m.name) for m in last}, {("joint_1_motor",)})
        for m in last:
            self.assertAlmostEqual(m.effort[0], EXPECTED, delta=1e-6)

    def test_1_auto_activated_copy_commands_the_pd_torque(self):
        self.assert_commands(AUTO)

    def test_2_default_copy_waits_until_activated(self):
        state = self.call(GetState, f"/{MANUAL}/damping_controller/get_state", GetState.Request())
        self.assertEqual(state.current_state.id, State.PRIMARY_STATE_UNCONFIGURED)
        self.spin_until(lambda: False, 1.0)  # fed for a second: still silent
        self.assertEqual(self.commands[MANUAL], [])
        for transition in (Transition.TRANSITION_CONFIGURE, Transition.TRANSITION_ACTIVATE):
            answer = self.call(ChangeState, f"/{MANUAL}/damping_controller/change_state",
                               ChangeState.Request(transition=Transition(id=transition)))
            self.assertTrue(answer.success, f"transition {transition} refused")
        self.assert_commands(MANUAL)


@launch_testing.post_shutdown_test()
class TestShutdown(unittest.TestCase):
    def test_nodes_exit_cleanly(self, proc_info):
        launch_testing.asserts.assertExitCodes(proc_info)
