"""Both nodes in one executor (lock step, bundled parameters): closed-loop behaviour over ROS.

Checked against the offline simulator (simulate.simulate on the same file and scenario) and
the closed-loop poles of linear.analyze (cross-checked there with scipy.linalg.eig).
"""
import math

import numpy as np
import pytest
from rclpy.parameter import Parameter
from sensor_msgs.msg import JointState

from compliant_damping.analysis import linear
from compliant_damping.io import config, parameter_keys
from compliant_damping.control import controller, laws
from compliant_damping.io.metrics import joint_metrics
from compliant_damping.nodes.messages import trajectory_msg
from compliant_damping.sim import scenarios, simulate
from node_harness import DOC, ros, seconds, stamp  # noqa: F401 (ros is a fixture)

pytestmark = pytest.mark.ros

STEP_AT, STEP = 0.1, 0.05  # the setpoint_step scenario: +0.05 rad at 0.1 s


def _reference(t: float, q: float) -> JointState:
    msg = JointState(name=["knee"], position=[q], velocity=[0.0])
    msg.header.stamp = stamp(t)
    return msg


def _start_loop(ros, law="decoupled_damper", reference=None, **overrides):
    """Active controller, a reference queued in it, then the simulated joint (which starts the loop)."""
    ctrl = ros.controller(law=law, **overrides)
    assert ctrl.trigger_configure().name == "SUCCESS" and ctrl.trigger_activate().name == "SUCCESS"
    if reference is not None:
        ros.publish_when_heard(ros.probe.reference, reference)
        assert ros.spin_until(lambda: len(ctrl.refs) == 1, 5.0)
    return ctrl, ros.simulated_joint()


def _link_positions(states, duration):
    """{tick: q} from recorded joint_states (repeats share a stamp)."""
    return {round(seconds(m.header.stamp) * 1000): m.position[0] for m in states
            if seconds(m.header.stamp) < duration - 1e-9}


def test_setpoint_settles_like_dominant_pole_and_matches_offline(ros):
    duration = 1.0
    ctrl, sim = _start_loop(ros, reference=_reference(STEP_AT, STEP))
    assert ros.spin_until(lambda: sim.plant.ticks >= round(duration * 1000), 60.0), "loop stalled"
    q_ros = _link_positions(ros.probe.states, duration)
    assert sorted(q_ros) == list(range(round(duration * 1000)))

    ctrl_setup, sim_setup = config.load(config.bundled())
    scenario = scenarios.make("setpoint_step", sim_setup.joints, step=STEP)
    offline = simulate.simulate(sim_setup.joints, controller.bank(ctrl_setup), scenario, duration,
                                control_dt=1.0 / ctrl_setup.control_rate, substeps=sim_setup.substeps)
    q = np.array([q_ros[k] for k in range(len(offline.t))])
    difference = np.max(np.abs(q - offline.q[:, 0]))
    print(f"max |q_ros - q_offline| = {difference:.3g} rad")
    assert difference < 1e-3

    # Settling into 0.01 rad of the new set point vs the dominant pole of the linearised loop:
    # a single-pole envelope exp(-sigma t) shrinks the step to the band after ln(step/band)/sigma
    # (the 2 % version, 4/sigma, is common practice); other modes make it an estimate, so the
    # measured time must lie within a factor of about three of it.
    target = STEP
    outside = np.nonzero((offline.t >= STEP_AT) & (np.abs(q - target) > 0.01))[0]
    settling = offline.t[outside[-1] + 1] - STEP_AT
    joint = ctrl_setup.joints[0]
    sigma = linear.analyze(sim_setup.joints[0].plant, laws.make_law("decoupled_damper", joint.model, joint.gains),
                             target).dominant.decay_rate
    estimate = math.log(STEP / 0.01) / sigma
    print(f"settling to 0.01 rad: {settling:.3f} s; dominant pole -{sigma:.2f} 1/s gives {estimate:.3f} s")
    assert 0.3 * estimate <= settling <= 1.5 * estimate
    assert abs(q[-1] - target) < 1e-3
    assert ctrl.bank[0].fault is None


def test_law_switch_under_motion_is_bumpless(ros):
    # Slew limit raised far above the bundled 1e4 N m/s so that it cannot hide a jump.
    ctrl, sim = _start_loop(ros, law="motor_pd", reference=_reference(0.02, 0.3),
                            knee__limits__torque_rate=1.0e6)
    assert ros.spin_until(lambda: sim.plant.ticks >= 80, 30.0)
    switched_after = ctrl.last_answered_ns
    assert ctrl.set_parameters([Parameter("law", value="decoupled_damper")])[0].successful
    assert ros.spin_until(lambda: sim.plant.ticks >= 120, 30.0)
    by_stamp = {round(seconds(m.header.stamp) * 1e9): m.effort[0] for m in ros.probe.efforts}
    ticks = sorted(by_stamp)
    i = ticks.index(switched_after)
    before, last, first = by_stamp[ticks[i - 1]], by_stamp[ticks[i]], by_stamp[ticks[i + 1]]
    bundled_rate = config.node_parameters(DOC, config.CONTROLLER_NODE)["knee.limits.torque_rate"]
    jump, usual = abs(first - last), abs(last - before)
    print(f"law switch under motion: tau {last:.4f} -> {first:.4f} N m (tick before: change {usual:.4f} N m)")
    assert abs(sim.plant.x[0, 1]) > 0.1  # the link is moving
    assert jump <= bundled_rate * 1e-3
    # A restart from fresh states (x = q) would jump by the damper's stored force; bumpless
    # initialisation reproduces the last command, so the jump is one tick's change.
    assert jump <= 3.0 * usual + 1e-6
    assert ctrl.bank[0].law_name == "decoupled_damper" and ctrl.bank[0].fault is None


def test_rejected_parameter_changes_keep_old_values(ros):
    ctrl = ros.controller()
    assert ctrl.trigger_configure().name == "SUCCESS"
    cases = [("knee.gains.motor_stiffness", -50.0, "knee.gains.motor_stiffness"),
             ("knee.limits.torque", 80.0, "driver"),
             ("knee.model.spring_stiffness", 250.0, "only while unconfigured")]
    for key, value, said in cases:
        old = ctrl.get_parameter(key).value
        old_setup = ctrl.setup
        result = ctrl.set_parameters([Parameter(key, value=value)])[0]
        print(f"{key} = {value}: refused: {result.reason}")
        assert not result.successful and said in result.reason
        assert ctrl.get_parameter(key).value == old and ctrl.setup is old_setup
    # an accepted change reaches the running controller
    assert ctrl.set_parameters([Parameter("knee.limits.torque", value=30.0)])[0].successful
    assert ctrl.bank.filters[0].limits.torque == 30.0


def test_parameters_are_described_with_unit_and_meaning(ros):
    ctrl, sim = ros.controller(), ros.simulated_joint()
    spec = {s.key: s for s in parameter_keys.parameter_specs(config.CONTROLLER_NODE, ["knee"])}
    for key in ("knee.limits.torque", "knee.gains.link_damping", "watchdog_timeout"):
        assert ctrl.describe_parameter(key).description == spec[key].description
    assert "[N m]" in ctrl.describe_parameter("knee.limits.torque").description
    assert "[rad]" in sim.describe_parameter("knee.stop_upper").description
    assert ctrl.describe_parameter("joint_names").read_only


def test_lock_gains_refuses_law_and_gain_changes(ros):
    ctrl = ros.controller(lock_gains=True)
    assert ctrl.trigger_configure().name == "SUCCESS"
    for key, value in (("law", "motor_pd"), ("knee.gains.link_damping", 5.0)):
        result = ctrl.set_parameters([Parameter(key, value=value)])[0]
        assert not result.successful and "lock_gains" in result.reason
    bundled = config.node_parameters(DOC, config.CONTROLLER_NODE)
    assert ctrl.bank[0].law_name == bundled["law"]
    assert ctrl.bank[0].gains.link_damping == bundled["knee.gains.link_damping"]


def test_external_impulse_topic_matches_the_offline_impulse_scenario(ros):
    # The topic delivers the impulse as a one-period pulse; the external_impulse scenario with
    # impulse_width = one period is the same input, so the runs must agree (offline simulator).
    impulse, at = 0.05, 0.2
    ctrl = ros.controller()
    assert ctrl.trigger_configure().name == "SUCCESS"
    sim = ros.simulated_joint()  # waits: nobody answers yet
    msg = JointState(name=["knee"], effort=[impulse])
    msg.header.stamp = stamp(at)
    ros.publish_when_heard(ros.probe.impulse, msg)
    assert ros.spin_until(lambda: len(sim.plant.external) == 1, 5.0)
    assert ctrl.trigger_activate().name == "SUCCESS"
    duration = 0.6
    assert ros.spin_until(lambda: sim.plant.ticks >= round(duration * 1000), 60.0)
    q_ros = _link_positions(ros.probe.states, duration)

    ctrl_setup, sim_setup = config.load(config.bundled())
    scenario = scenarios.make("external_impulse", sim_setup.joints, impulse=impulse, impulse_width=1e-3)
    assert scenario.external[0, 1] == at
    offline = simulate.simulate(sim_setup.joints, controller.bank(ctrl_setup), scenario, duration,
                                control_dt=1e-3, substeps=sim_setup.substeps)
    q = np.array([q_ros[k] for k in range(len(offline.t))])
    print(f"impulse {impulse} N m s: peak link excursion {np.max(np.abs(q)):.4f} rad, "
          f"max |q_ros - q_offline| = {np.max(np.abs(q - offline.q[:, 0])):.3g} rad")
    # impulse-momentum theorem: right after the pulse the link speed is J / M (spring and
    # gravity act for only one period; a few per cent)
    after = next(m for m in ros.probe.states if round(seconds(m.header.stamp) * 1000) == round(at * 1000) + 1)
    assert after.velocity[0] == pytest.approx(impulse / sim_setup.joints[0].plant.link_inertia, rel=0.05)
    assert np.max(np.abs(q - offline.q[:, 0])) < 1e-9


def test_end_stop_moves_at_run_time(ros):
    ctrl, sim = _start_loop(ros, reference=_reference(0.0, 0.5))
    refused = sim.set_parameters([Parameter("knee.stop_upper", value=-0.1)])[0]
    assert not refused.successful and "initial_position" in refused.reason
    assert sim.set_parameters([Parameter("knee.stop_upper", value=0.3)])[0].successful
    assert ros.spin_until(lambda: sim.plant.ticks >= 800, 60.0)
    q = [m.position[0] for m in ros.probe.states]
    print(f"stop moved to 0.3 rad: max link position {max(q):.4f} rad, last {q[-1]:.4f} rad")
    assert 0.3 < max(q) < 0.35  # the impact pushes in a little, far from the reference (0.5) or the old stop
    # at rest the contact (stiffness 2e4 N m/rad) holds at most the 40 N m torque limit plus gravity
    assert abs(q[-1] - 0.3) < (40.0 + 2.0) / 2.0e4


def test_accepted_gain_change_ramps_in_over_gain_ramp_time(ros):
    ctrl, sim = _start_loop(ros, reference=_reference(0.0, 0.1))
    ramp = ctrl.setup.gain_ramp_time
    assert ros.spin_until(lambda: sim.plant.ticks >= 100, 30.0)
    old = ctrl.bank[0].gains
    assert ctrl.set_parameters([Parameter("knee.gains.motor_damping", value=2.0 * old.motor_damping)])[0].successful
    assert ctrl.bank[0].gains.motor_damping == 2.0 * old.motor_damping  # the target
    start = sim.plant.ticks
    half = start + round(0.5 * ramp * 1000)
    assert ros.spin_until(lambda: sim.plant.ticks >= half, 30.0)
    mid = ctrl.bank[0]._runner.law.gains.motor_damping  # the gains the law runs with now
    assert 1.3 * old.motor_damping < mid < 1.7 * old.motor_damping  # about halfway (linear blend)
    assert ros.spin_until(lambda: sim.plant.ticks >= start + round(ramp * 1000) + 5, 30.0)
    assert ctrl.bank[0]._runner.law.gains.motor_damping == 2.0 * old.motor_damping
    assert ctrl.bank[0].fault is None


def test_a_trajectory_over_ros_is_tracked_as_offline(ros):
    """track_move (0.3 rad in 0.8 s) sent on link_trajectory: the lock-step loop equals the offline
    simulator given the same spline (scenarios.streamed) to 1e-9 rad, and decoupled_damper tracks it
    to within 3 mrad peak (the bound issue 11 sets for the sampled bench joint with friction). A
    trajectory whose points carry velocities is refused and changes nothing."""
    ctrl_setup, sim_setup = config.load(config.bundled())
    scenario = scenarios.streamed(scenarios.make("track_move", sim_setup.joints))
    ctrl = ros.controller(law="decoupled_damper")
    assert ctrl.trigger_configure().name == "SUCCESS"
    sim = ros.simulated_joint()  # waits: nobody answers yet
    spline = scenario.references[0]
    with_speeds = trajectory_msg("knee", spline)
    with_speeds.points[1].velocities = [0.0]
    ros.publish_when_heard(ros.probe.trajectory, with_speeds)
    assert ros.spin_until(lambda: ctrl.refs.rejected == 1, 5.0) and len(ctrl.refs) == 0
    assert "points carry velocities" in ctrl.refs.last_issue.reason
    ros.probe.trajectory.publish(trajectory_msg("knee", spline))
    assert ros.spin_until(lambda: len(ctrl.refs) == 1, 5.0)
    assert ctrl.trigger_activate().name == "SUCCESS"
    assert ros.spin_until(lambda: sim.plant.ticks >= round(scenario.duration * 1000), 60.0)
    q_ros = _link_positions(ros.probe.states, scenario.duration)

    offline = simulate.simulate(sim_setup.joints, controller.bank(ctrl_setup), scenario, control_dt=1e-3,
                                substeps=sim_setup.substeps, seed=sim_setup.seed)
    q = np.array([q_ros[k] for k in range(len(offline.t))])
    error = joint_metrics(offline, scenario)["knee"].tracking_peak
    print(f"trajectory over ROS: max |q_ros - q_offline| = {np.max(np.abs(q - offline.q[:, 0])):.3g} rad, "
          f"peak tracking error {error * 1e3:.3f} mrad")
    np.testing.assert_allclose(q, offline.q[:, 0], rtol=0, atol=1e-9)
    assert error < 3e-3
