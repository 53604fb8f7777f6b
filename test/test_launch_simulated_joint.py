"""Launch test of launch/simulated_joint.launch.py: simulated knee + controller, over ROS.

Two runs of the launch file on the bundled one-joint file: real time (as bundled) and lock step
(the same file with ``lock_step: true``, where the launch file must put the controller on sim
time). Each run gets its own namespace, law:=link_damping and a layer_file that relaxes the
watchdog to 1 s, so that a loaded test machine that stalls the real-time simulation for 50 ms
cannot latch the controller in safe mode. The test checks that joint states and effort commands
flow, that the law argument and the sim-time choice reached the controller, then steps the link
reference from 0 to 0.1 rad and waits for the joint to come to rest there. Reference for the rest
state: statics of a pendulum load on a spring (handbook statics): at rest the spring torque
k (theta - q) and the motor torque both equal the gravity torque m g0 l sin(q) = 2.0 sin(0.1) N m
of the bundled knee.

Runs as a launch_testing test (pytest plugin, or ``launch_test FILE``) with the launch packages
and the package's executables on the ament index (colcon workspace). Skipped without them.
launch_testing's pytest plugin (jazzy and rolling sources) declares a hook argument that
pytest 9 no longer has, so with the plugin installed use pytest < 9 or ``launch_test FILE``.
"""
import math
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
import yaml  # noqa: E402
from launch.launch_description_sources import PythonLaunchDescriptionSource  # noqa: E402
from rcl_interfaces.srv import GetParameters  # noqa: E402
from rclpy.qos import QoSProfile  # noqa: E402
from sensor_msgs.msg import JointState  # noqa: E402

from compliant_damping.io import config  # noqa: E402
from launch_probe import NamespaceProbe, spin_until  # noqa: E402

LAUNCH_FILE = Path(__file__).resolve().parent.parent / "launch" / "simulated_joint.launch.py"
RUN = uuid.uuid4().hex[:8]
GRAVITY_TORQUE = 2.0  # N m, knee.gravity_torque of config/one_joint.yaml
STEP = 0.1            # rad


def namespace(lock_step: bool) -> str:
    return f"launch_test_{RUN}_{'lock_step' if lock_step else 'real_time'}"


@pytest.mark.launch
@pytest.mark.launch_test
@launch_testing.parametrize("lock_step", [False, True])
def generate_test_description(lock_step):
    folder = Path(tempfile.mkdtemp(prefix="cdamp_launch_test_"))
    doc = config.read(config.bundled())
    doc[f"/**/{config.SIM_NODE}"]["ros__parameters"]["lock_step"] = lock_step
    (folder / "joint.yaml").write_text(yaml.safe_dump(doc))
    (folder / "relaxed_watchdog.yaml").write_text(f"{config.CONTROLLER_NODE}:\n  ros__parameters:\n"
                                                  "    watchdog_timeout: 1.0\n")
    arguments = {"params_file": str(folder / "joint.yaml"), "layer_file": str(folder / "relaxed_watchdog.yaml"),
                 "namespace": namespace(lock_step), "law": "link_damping"}
    return launch.LaunchDescription([
        launch.actions.IncludeLaunchDescription(PythonLaunchDescriptionSource(str(LAUNCH_FILE)),
                                                launch_arguments=arguments.items()),
        launch_testing.actions.ReadyToTest(),
    ])


class TestSimulatedJointLaunch(NamespaceProbe, unittest.TestCase):
    probe_name = "launch_test_probe"

    def listen(self, lock_step):
        """Namespace of this run; subscribes to its joint_states and motor_effort once."""
        return self.listen_to(namespace(lock_step))

    def test_1_states_and_commands_flow(self, lock_step):
        ns = self.listen(lock_step)
        self.assertTrue(spin_until(self.node, lambda: len(self.states) > 200 and len(self.commands) > 200, 30.0),
                        f"{len(self.states)} joint states, {len(self.commands)} commands in {ns}")
        self.assertEqual(list(self.states[-1].name), ["knee", "knee_motor"])
        self.assertEqual(list(self.commands[-1].name), ["knee_motor"])

    def test_2_launch_arguments_applied(self, lock_step):
        ns = self.listen(lock_step)
        client = self.node.create_client(GetParameters, f"/{ns}/damping_controller/get_parameters")
        self.assertTrue(client.wait_for_service(timeout_sec=10.0))
        future = client.call_async(GetParameters.Request(names=["law", "use_sim_time"]))
        self.assertTrue(spin_until(self.node, future.done, 10.0))
        law, sim_time = future.result().values
        self.assertEqual(law.string_value, "link_damping")
        self.assertEqual(sim_time.bool_value, lock_step)

    def test_3_comes_to_rest_at_a_new_reference(self, lock_step):
        ns = self.listen(lock_step)
        pub = self.node.create_publisher(JointState, f"/{ns}/link_reference", QoSProfile(depth=10))
        self.assertTrue(spin_until(self.node, lambda: pub.get_subscription_count() > 0, 10.0))
        self.states.clear()
        # Wait for 2.5 s of simulated time (one joint state per 1 ms period; settling takes ~0.4 s
        # offline): counted in states, not wall time, so a loaded machine only makes it slower.
        # The set point is sent again every 0.2 s so that a late discovery cannot lose it.
        deadline = time.monotonic() + 45.0
        while len(self.states) < 2500:
            self.assertLess(time.monotonic(), deadline, f"only {len(self.states)} joint states in 45 s")
            pub.publish(JointState(name=["knee"], position=[STEP], velocity=[0.0]))  # stamp zero: at once
            spin_until(self.node, lambda: False, 0.2)
        self.states.clear()
        self.commands.clear()
        self.assertTrue(spin_until(self.node, lambda: len(self.states) > 100 and len(self.commands) > 100, 10.0))
        q = [m.position[0] for m in self.states[-100:]]
        spring = [m.effort[0] for m in self.states[-100:]]
        tau = [m.effort[0] for m in self.commands[-100:]]
        applied = [m.effort[1] for m in self.states[-100:]]  # motor entry: torque the plant applied
        expected = GRAVITY_TORQUE * math.sin(STEP)  # 0.1997 N m: pendulum statics
        self.assertAlmostEqual(sum(q) / len(q), STEP, delta=0.005,
                               msg=f"commanded {tau[-5:]}, applied {applied[-5:]}, q {q[-5:]}")
        self.assertLess(max(q) - min(q), 0.002)  # at rest, not ringing
        self.assertAlmostEqual(sum(spring) / len(spring), expected, delta=0.03)
        self.assertAlmostEqual(sum(tau) / len(tau), expected, delta=0.05)  # motor Coulomb friction 0.2 N m


@launch_testing.post_shutdown_test()
class TestShutdown(unittest.TestCase):
    def test_nodes_exit_cleanly(self, proc_info):
        launch_testing.asserts.assertExitCodes(proc_info)
