"""The simulated joint node running a URDF robot (the bundled leg, config/compliant_leg.yaml), in lock step.

References:

* the offline robot simulator (robot_sim.simulate_robot, checked against outside references in
  test_robot_sim.py, test_elastic_chain.py and test_leg_landing.py): answered tick by tick by
  the same controller (controller.robot of the file's controller section), the node's leg must
  follow the offline trajectory of the same scenario to round-off, as test_nodes_loop.py checks
  for the bench joint;
* the floor's geometry from Pinocchio's frame placement (UrdfChain.frame_position): a floor
  moved at run time to 3 mm above the crouched foot is 3 mm deep in it.
"""
import math

import numpy as np
import pytest
from rcl_interfaces.srv import SetParameters
from rclpy.parameter import Parameter
from rclpy.qos import QoSProfile, qos_profile_sensor_data
from sensor_msgs.msg import JointState

pytest.importorskip("pinocchio", reason="URDF robots need Pinocchio (the pin package)")

from compliant_damping.control import controller  # noqa: E402
from compliant_damping.control.sample import Reference  # noqa: E402
from compliant_damping.io import config  # noqa: E402
from compliant_damping.io import joint_state_codec as codec  # noqa: E402
from compliant_damping.nodes.simulated_joint_node import SimulatedJointNode  # noqa: E402
from compliant_damping.sim import scenarios  # noqa: E402
from compliant_damping.sim.robot_sim import robot_plant, simulate_robot  # noqa: E402
from node_harness import ros, seconds, stamp  # noqa: E402,F401 (ros is a fixture)

pytestmark = pytest.mark.ros

LEG_FILE = config.bundled("compliant_leg.yaml")
LEG_CTRL, LEG = config.load(LEG_FILE)
IMPULSE, IMPULSE_AT = 0.05, 0.2  # N m s on every link (the external_impulse scenario's time, s)


def _leg_node(ros) -> SimulatedJointNode:
    """The simulated joint node on the bundled leg's section, in lock step."""
    return ros.start(SimulatedJointNode, {**config.node_parameters(config.read(LEG_FILE), config.SIM_NODE),
                                          "lock_step": True})


def _reference(scenario, t: float) -> Reference:
    """The scenario's references of every joint at ``t`` (s) as one Reference of arrays (as simulate_robot)."""
    return Reference(*(np.array(column) for column in zip(*(r.sample(t) for r in scenario.references))))


class _Answerer:
    """Answers each new joint state with the efforts of an offline RobotController, stamped as the state."""

    def __init__(self, node, scenario):
        self.robot = controller.robot(LEG_CTRL)
        self.decoder = codec.StateDecoder(LEG_CTRL.joints, spring_torque_from_effort=True)  # tau_s as offline
        self.scenario, self.period = scenario, 1.0 / LEG_CTRL.control_rate
        self.period_ns = round(1e9 * self.period)
        self.answering, self.answered = False, set()
        self.efforts = node.create_publisher(JointState, "motor_effort", QoSProfile(depth=1000))
        node.create_subscription(JointState, "joint_states", self._on_state, QoSProfile(depth=1000))

    def _on_state(self, msg):
        ns = msg.header.stamp.sec * 1_000_000_000 + msg.header.stamp.nanosec
        if not self.answering or ns in self.answered:  # a repeated state is answered once
            return
        self.answered.add(ns)
        readings = self.decoder.decode(msg.name, msg.position, msg.velocity, msg.effort)
        assert not isinstance(readings, codec.Rejection), readings
        t = (ns // self.period_ns) * self.period  # tick * period, as simulate_robot counts time
        tau = self.robot.step(readings, _reference(self.scenario, t), t, self.period)
        answer = JointState(name=[j.command for j in LEG_CTRL.joints], effort=tau.tolist())
        answer.header.stamp = msg.header.stamp
        self.efforts.publish(answer)


def test_the_leg_over_ros_follows_the_offline_robot_simulator(ros):
    """Hold at the initial positions (the floor stays put, 0.213 m below the foot); the
    external_impulse topic hits every link at 0.2 s so that every joint moves."""
    period = 1.0 / LEG.state_rate
    scenario = scenarios.make("external_impulse", LEG.joints, links=LEG.links, floor=LEG.contact,
                              impulse=IMPULSE, impulse_width=period)
    duration, ticks = 0.35, 350
    answerer = _Answerer(ros.probe.node, scenario)
    sim = _leg_node(ros)  # publishes its first state and waits: nobody answers yet
    msg = JointState(name=LEG.joint_names, effort=[IMPULSE] * len(LEG.joints))
    msg.header.stamp = stamp(IMPULSE_AT)
    ros.publish_when_heard(ros.probe.impulse, msg)
    assert ros.spin_until(lambda: len(sim.plant.external) == len(LEG.joints), 5.0), "impulse not taken"
    assert np.array_equal(sim.plant.external, scenario.external)  # the scenario's rows [joint, t_on, t_off, torque]
    answerer.answering = True  # the state is sent again after 0.2 s of wall time; answered from then on
    assert ros.spin_until(lambda: sim.plant.ticks >= ticks, 120.0), f"loop stalled at tick {sim.plant.ticks}"

    by_tick = {}
    for m in ros.probe.states:
        by_tick[round(seconds(m.header.stamp) / period)] = m
    first = by_tick[0]
    assert list(first.name) == [e for n in LEG.joint_names for e in (n, f"{n}_motor")]  # every joint, both entries
    link = [list(first.name).index(n) for n in LEG.joint_names]
    q_ros = np.array([[by_tick[k].position[i] for i in link] for k in range(ticks)])

    offline = simulate_robot(robot_plant(LEG, scenario), controller.robot(LEG_CTRL), scenario, duration, period,
                             LEG.substeps, sensors=[j.sensor for j in LEG.joints], seed=LEG.seed)
    assert len(offline.t) == ticks
    moved = np.max(np.abs(offline.q - offline.q[0]), axis=0)
    err = np.max(np.abs(q_ros - offline.q))
    print(f"leg over ROS vs offline: max |q| error {err:.1e} rad over {duration} s; "
          f"excursions {np.round(moved, 4)} rad; faults {offline.faults}")
    assert np.all(moved > 5e-4)  # every joint took its impulse
    assert offline.faults == (None,) * len(LEG.joints)
    assert tuple(answerer.robot.faults) == offline.faults
    assert err < 1e-9


def _set(ros, node_name: str, parameter: Parameter):
    """Set one parameter through the node's set_parameters service (ROS 2 parameter API); returns the result."""
    client = ros.probe.node.create_client(SetParameters, f"{ros.probe.node.get_namespace()}/{node_name}/set_parameters")
    assert ros.spin_until(client.service_is_ready, 5.0), "set_parameters not available"
    future = client.call_async(SetParameters.Request(parameters=[parameter.to_parameter_msg()]))
    assert ros.spin_until(future.done, 5.0), "set_parameters gave no answer"
    ros.probe.node.destroy_client(client)
    return future.result().results[0]


def test_the_floor_height_changes_at_run_time_and_refuses_a_non_finite_value(ros):
    sim = _leg_node(ros)
    q0 = sim.plant.x[:, 0]
    foot = float(np.asarray(LEG.contact.normal) @ LEG.links.frame_position(LEG.contact.frame, q0))
    assert sim.plant.floor.depth(LEG.links, q0, sim.plant.t) < -0.2  # the file's floor: 0.213 m below the foot
    raised = foot + 0.003  # m: 3 mm into the foot
    accepted = _set(ros, config.SIM_NODE, Parameter("contact.height", value=raised))
    assert accepted.successful, accepted.reason
    assert sim.get_parameter("contact.height").value == raised
    assert sim.plant.floor.height == raised
    assert sim.plant.floor.depth(LEG.links, q0, sim.plant.t) == pytest.approx(0.003, abs=1e-12)
    for bad in (math.nan, math.inf):
        refused = _set(ros, config.SIM_NODE, Parameter("contact.height", value=bad))
        print(f"contact.height = {bad}: refused: {refused.reason}")
        assert not refused.successful
        assert refused.reason.startswith("contact.height: must be finite")
        assert sim.get_parameter("contact.height").value == raised and sim.plant.floor.height == raised


def test_a_robot_changes_its_drive_parameters_and_declares_no_link_keys(ros):
    sim = _leg_node(ros)
    knee = LEG.joint_names.index("knee_pitch")
    assert not sim.has_parameter("knee_pitch.link_inertia")  # the URDF gives the links
    assert sim.set_parameters([Parameter("knee_pitch.stop_upper", value=2.0)])[0].successful
    assert sim.setup.joints[knee].plant.stop_upper == 2.0
    refused = sim.set_parameters([Parameter("contact.frame", value="")])[0]
    assert not refused.successful and refused.reason.startswith("contact.frame: fixed after start")


def test_the_bench_joint_has_no_floor_to_move(ros):
    sim = ros.simulated_joint()  # the bundled bench knee: no URDF, no floor
    refused = sim.set_parameters([Parameter("contact.height", value=0.1)])[0]
    assert not refused.successful and refused.reason.startswith("contact.height: fixed after start")
    assert sim.plant.floor is None


@pytest.mark.parametrize("held", [True, False])
def test_in_real_time_the_leg_rests_on_its_stand_until_the_first_command(ros, held):
    """Real time (lock_step false): with hold_until_commanded (the default) the leg's state goes out
    at its rest pose (scenarios.rest_state, the offline simulators' start) with fresh stamps and the
    plant does not move until a motor_effort command comes; then it runs. Without it the leg runs
    unheld from the start: with zero torque the motors let the springs unload and the links sag
    (gravity, the URDF's inertias)."""
    params = {**config.node_parameters(config.read(LEG_FILE), config.SIM_NODE), "lock_step": False,
              "hold_until_commanded": held}
    states = []  # real time publishes with sensor-data QoS (best effort)
    ros.probe.node.create_subscription(JointState, "joint_states", states.append, qos_profile_sensor_data)
    sim = ros.start(SimulatedJointNode, params)
    ros.spin_for(0.3)
    rest = scenarios.rest_state(LEG.joints, LEG.links)[:, 0]
    stamps = [seconds(m.header.stamp) for m in states]
    q = np.array([[m.position[list(m.name).index(n)] for n in LEG.joint_names] for m in states])
    sagged = float(np.max(np.abs(q[-1] - rest)))
    print(f"hold_until_commanded {held}: {len(stamps)} states in 0.3 s, plant ticks {sim.plant.ticks}, "
          f"largest sag {sagged:.4f} rad")
    assert len(stamps) > 20 and all(b > a for a, b in zip(stamps, stamps[1:]))  # fresh stamps either way
    if held:
        assert sim.plant.ticks == 0 and sagged == 0.0
        command = JointState(name=[j.command for j in LEG_CTRL.joints], effort=[0.0] * 3)
        ros.publish_when_heard(ros.probe.node.create_publisher(JointState, "motor_effort", 10), command)
        assert ros.spin_until(lambda: sim.plant.ticks > 20, 5.0)  # released: the plant runs
    else:
        assert sim.plant.ticks > 20 and sagged > 0.01
