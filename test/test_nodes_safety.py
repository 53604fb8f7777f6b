"""Controller node safety over ROS, in one process: watchdog, ~/stop, ~/reset_fault, lifecycle,
malformed joint states. Sim time throughout, so every time below is deterministic.

Expected values come from the design notes' safety rules (section 5) and the bundled parameter
file; the watchdog bound "timeout plus two periods" is the requirement stated for the node.
"""
import math

import pytest
import rclpy
from rclpy.event_handler import PublisherEventCallbacks, SubscriptionEventCallbacks
from rclpy.parameter import Parameter
from rclpy.qos import DurabilityPolicy, QoSPolicyKind, QoSProfile, ReliabilityPolicy
from builtin_interfaces.msg import Duration
from sensor_msgs.msg import JointState
from trajectory_msgs.msg import JointTrajectory, JointTrajectoryPoint

from compliant_damping.io import config
from compliant_damping.control.safety import Fault, FaultCode
from node_harness import DOC, isolation, ros, seconds, stamp  # noqa: F401 (ros is a fixture)
from rosgraph_msgs.msg import Clock

pytestmark = pytest.mark.ros

BUNDLED = config.node_parameters(DOC, config.CONTROLLER_NODE)
PERIOD = 1.0 / BUNDLED["control_rate"]
TIMEOUT = BUNDLED["watchdog_timeout"]
SLEW = BUNDLED["knee.limits.torque_rate"] * PERIOD  # N m per tick


def _state(t, q=0.0, dq=0.0, theta=0.0, dtheta=0.0, names=("knee", "knee_motor")):
    msg = JointState(name=list(names), position=[q, theta][:len(names)], velocity=[dq, dtheta][:len(names)])
    msg.header.stamp = stamp(t)
    return msg


def _set_clock(ros, ctrl, t):
    ros.probe.clock.publish(Clock(clock=stamp(t)))
    assert ros.spin_until(lambda: ctrl.get_clock().now().nanoseconds == round(t * 1e9), 5.0), "clock not heard"


def _answer(ros, t):
    """The motor_effort message answering the joint state stamped t, or None."""
    return next((m for m in ros.probe.efforts if seconds(m.header.stamp) == pytest.approx(t, abs=1e-9)), None)


def _tick(ros, ctrl, t, **state):
    """Clock to t, one joint state stamped t; returns the answering effort (N m)."""
    _set_clock(ros, ctrl, t)
    ros.probe.joint_states.publish(_state(t, **state))
    assert ros.spin_until(lambda: _answer(ros, t) is not None, 5.0), f"no command for t={t}"
    return _answer(ros, t).effort[0]


def _active_controller(ros, **overrides):
    ctrl = ros.controller(**overrides)
    assert ctrl.trigger_configure().name == "SUCCESS" and ctrl.trigger_activate().name == "SUCCESS"
    ros.publish_when_heard(ros.probe.clock, Clock(clock=stamp(0.0)))
    assert ros.spin_until(lambda: ros.probe.joint_states.get_subscription_count() > 0, 5.0)
    return ctrl


def _reference_now(ros, ctrl, q):
    msg = JointState(name=["knee"], position=[q], velocity=[0.0])  # stamp zero: applies at once
    ros.publish_when_heard(ros.probe.reference, msg)
    assert ros.spin_until(lambda: len(ctrl.refs) == 1, 5.0)


def test_watchdog_trips_within_timeout_plus_two_periods_and_needs_reset(ros):
    ctrl = _active_controller(ros)
    t_last = 0.0
    for k in range(1, 21):
        t_last = k * PERIOD
        assert _tick(ros, ctrl, t_last) == 0.0  # at rest on the set point, no gravity at q = 0
    n_before = len(ros.probe.efforts)
    t = t_last
    while ctrl.bank[0].fault is None and t < t_last + 3 * TIMEOUT:  # joint states stop; time goes on
        t += PERIOD
        _set_clock(ros, ctrl, t)
        ros.spin_until(lambda: ctrl.bank[0].fault is not None, 0.05)
    assert ctrl.bank[0].fault is not None and ctrl.bank[0].fault.code is FaultCode.WATCHDOG
    assert ros.spin_until(lambda: len(ros.probe.efforts) > n_before, 5.0)
    first_safe = ros.probe.efforts[n_before]  # the watchdog's first safe-mode command, stamped when it tripped
    reaction = seconds(first_safe.header.stamp) - t_last
    print(f"watchdog reaction: {reaction * 1e3:.1f} ms (timeout {TIMEOUT * 1e3:.0f} ms, period {PERIOD * 1e3:.0f} ms)")
    assert TIMEOUT - 1e-9 <= reaction <= TIMEOUT + 2 * PERIOD + 1e-9

    def error_reported():
        return any(s.level == s.ERROR and "watchdog" in s.message and s.values[1].value == "safe"
                   for d in ros.probe.diagnostics for s in d.status)
    while not error_reported() and t < t_last + 2.0:  # diagnostics come at 2 Hz of sim time
        t += 0.01
        _set_clock(ros, ctrl, t)
        ros.spin_for(0.01)
    assert error_reported()

    refused = ros.probe.trigger(ros, "reset_fault")  # still no fresh joint state
    assert not refused.success and "no fresh joint state" in refused.message

    _reference_now(ros, ctrl, 0.1)  # the law would push towards 0.1 rad
    for _ in range(5):
        t += PERIOD
        assert _tick(ros, ctrl, t) == 0.0  # safe mode: motor damping of a motor at rest
    assert ros.probe.trigger(ros, "reset_fault").success
    t += PERIOD
    # law again, restarted bumpless from the last command (0 N m), holding the measured position
    # (0 rad), not the reference sent before the reset
    assert _tick(ros, ctrl, t) == 0.0 and ctrl.bank[0].fault is None
    _reference_now(ros, ctrl, 0.1)  # a new reference after the reset: the law pushes towards it
    resumed = []
    for _ in range(10):
        t += PERIOD
        resumed.append(_tick(ros, ctrl, t))
    assert all(b >= a for a, b in zip(resumed, resumed[1:])) and resumed[-1] > 1.0


def test_stop_service_then_reset_resumes_the_law(ros):
    ctrl = ros.controller()
    assert ctrl.trigger_configure().name == "SUCCESS" and ctrl.trigger_activate().name == "SUCCESS"
    _reference_now(ros, ctrl, 0.2)
    sim = ros.simulated_joint()
    assert ros.spin_until(lambda: sim.plant.ticks >= 100, 30.0)
    assert ros.probe.trigger(ros, "stop").success
    assert ros.spin_until(lambda: sim.plant.ticks >= 200, 30.0)
    assert ctrl.bank[0].fault == Fault(FaultCode.STOP_REQUESTED, "stop requested (~/stop)")
    # 100 ticks after the stop the slew-limited ramp is over: the command is the safe torque,
    # motor damping -safe_damping * theta' of the state it answers (design notes, section 5).
    last = ros.probe.efforts[-1]
    state = next(m for m in ros.probe.states if m.header.stamp == last.header.stamp)
    assert last.effort[0] == pytest.approx(-BUNDLED["knee.limits.safe_damping"] * state.velocity[1], abs=1e-12)
    assert ros.probe.trigger(ros, "reset_fault").success
    q_reset, ticks = sim.plant.x[0, 0], sim.plant.ticks
    assert abs(q_reset - 0.2) > 0.01  # the link drifted in safe mode (gravity against motor damping)
    assert ros.spin_until(lambda: sim.plant.ticks >= ticks + 400, 30.0)
    # the law restarts holding the position measured at the reset, not the old reference
    print(f"stop/reset: drifted to {q_reset:.4f} rad, held at {sim.plant.x[0, 0]:.4f} rad")
    assert ctrl.bank[0].fault is None and abs(sim.plant.x[0, 0] - q_reset) < 0.005
    _reference_now(ros, ctrl, 0.2)
    assert ros.spin_until(lambda: sim.plant.ticks >= ticks + 900, 30.0)
    assert abs(sim.plant.x[0, 0] - 0.2) < 0.02


def test_lifecycle_inactive_is_silent_and_deactivate_ramps_to_zero(ros):
    ctrl = ros.controller()
    assert ctrl.trigger_configure().name == "SUCCESS"
    _reference_now(ros, ctrl, 0.4)
    sim = ros.simulated_joint()
    ros.spin_for(0.5)  # inactive: the joint repeats its first state, nobody answers
    assert ros.probe.efforts == [] and sim.plant.ticks == 0 and len(ros.probe.states) >= 2

    assert ctrl.trigger_activate().name == "SUCCESS"
    assert ros.spin_until(lambda: sim.plant.ticks >= 30, 30.0)
    answered = ctrl.last_answered_ns  # ns stamp of the last state answered while active
    assert ctrl.trigger_deactivate().name == "SUCCESS"
    ros.spin_for(0.3)
    by_stamp = [(round(seconds(m.header.stamp) * 1e9), m.effort[0]) for m in ros.probe.efforts]
    last_active = next(tau for ns, tau in by_stamp if ns == answered)
    ramp = [tau for ns, tau in by_stamp if ns > answered]
    print(f"deactivate: {last_active:.3f} N m, then {ramp}")
    assert abs(last_active) > 1.0 and ctrl.bank[0].fault is None  # it was pushing towards 0.4 rad
    assert len(ramp) >= 2 and ramp[-1] == 0.0  # the safe state: zero torque, reached at the slew limit
    steps = [abs(b - a) for a, b in zip([last_active] + ramp, ramp)]
    assert max(steps) <= SLEW + 1e-9 and all(abs(b) < abs(a) for a, b in zip([last_active] + ramp, ramp))
    count = len(ros.probe.efforts)
    ros.spin_for(0.5)
    assert len(ros.probe.efforts) == count  # inactive again: nothing more on motor_effort

    assert ctrl.trigger_activate().name == "SUCCESS"  # no fault latched: commands resume
    ticks = sim.plant.ticks
    assert ros.spin_until(lambda: sim.plant.ticks >= ticks + 20, 30.0) and ctrl.bank[0].fault is None

    answered = ctrl.last_answered_ns
    assert ctrl.trigger_shutdown().name == "SUCCESS"  # from active: the same ramp, then silence for good
    ros.spin_for(0.3)
    ramp = [m.effort[0] for m in ros.probe.efforts if round(seconds(m.header.stamp) * 1e9) > answered]
    assert ramp and ramp[-1] == 0.0
    count = len(ros.probe.efforts)
    ros.spin_for(0.5)
    assert len(ros.probe.efforts) == count


def test_malformed_or_non_finite_joint_states_never_reach_the_motor(ros):
    ctrl = _active_controller(ros, array_output=True)
    assert _tick(ros, ctrl, PERIOD) == 0.0
    assert ros.spin_until(lambda: len(ros.probe.arrays) == 1, 5.0) and list(ros.probe.arrays[0].data) == [0.0]
    bad = [
        ("lengths", dict(), lambda m: m.velocity.pop()),
        ("missing motor entry", dict(names=("knee",)), None),
        ("NaN position", dict(q=math.nan), None),
        ("inf velocity", dict(dtheta=math.inf), None),
        ("repeated names", dict(names=("knee", "knee")), None),
    ]
    t = PERIOD
    for label, fields, spoil in bad:
        t += PERIOD
        _set_clock(ros, ctrl, t)
        msg = _state(t, **fields)
        if spoil:
            spoil(msg)
        ros.probe.joint_states.publish(msg)
        ros.spin_until(lambda: ctrl.decoder.rejected == bad.index((label, fields, spoil)) + 1, 2.0)
        ros.spin_for(0.05)
        assert _answer(ros, t) is None, f"{label}: a command was computed"
    assert ctrl.decoder.rejected == len(bad) and len(ros.probe.arrays) == 1
    assert ctrl.bank[0].fault is None  # nothing non-finite ever reached the law or the filter
    t += PERIOD
    assert _tick(ros, ctrl, t) == 0.0  # good states are answered again


def test_an_incompatible_peer_is_warned_on_its_own_side(ros):
    """The nodes' topics carry no QoS event handlers (nodes/topics.py); a peer with an incompatible
    QoS still hears of it through its own. Reference: the DDS request-versus-offered rules (DDS 1.4,
    section 2.2.3, the section number from memory): a reliable reader does not match a best-effort
    writer, nor a transient-local reader a volatile writer; the event fires on both ends."""
    ctrl = ros.controller()
    assert ctrl.trigger_configure().name == "SUCCESS"
    sim_time = Parameter("use_sim_time", value=ctrl.get_parameter("use_sim_time").value)
    bare = rclpy.create_node("bare_node", context=ros.context, parameter_overrides=[sim_time], **isolation())
    assert len(list(ctrl.waitables)) == len(list(bare.waitables))  # only rclpy's own: /parameter_events, /clock
    requested, offered = [], []
    ros.probe.node.create_subscription(JointState, "motor_effort", lambda _msg: None,
                                       QoSProfile(depth=10, durability=DurabilityPolicy.TRANSIENT_LOCAL),
                                       event_callbacks=SubscriptionEventCallbacks(incompatible_qos=requested.append))
    ros.probe.node.create_publisher(JointState, "link_reference",
                                    QoSProfile(depth=10, reliability=ReliabilityPolicy.BEST_EFFORT),
                                    event_callbacks=PublisherEventCallbacks(incompatible_qos=offered.append))
    assert ros.spin_until(lambda: requested and offered, 10.0), "the peer heard of no incompatible QoS"
    assert requested[0].last_policy_kind == QoSPolicyKind.DURABILITY
    assert offered[0].last_policy_kind == QoSPolicyKind.RELIABILITY
    bare.destroy_node()


def test_a_tightened_link_speed_limit_drops_a_queued_trajectory_beyond_it(ros):
    """0.5 rad in 0.16 s peaks at 630/256 * 0.5 / 0.16 = 7.69 rad/s (the ninth-degree rest-to-rest
    profile, worked out by hand): queued under the bundled 8 rad/s, dropped when the limit is
    lowered to 7 rad/s at run time; the change itself is accepted and the drop counted."""
    ctrl = ros.controller()
    assert ctrl.trigger_configure().name == "SUCCESS"
    msg = JointTrajectory(joint_names=["knee"], points=[
        JointTrajectoryPoint(positions=[0.0], time_from_start=Duration(sec=100)),
        JointTrajectoryPoint(positions=[0.5], time_from_start=Duration(sec=100, nanosec=160_000_000))])
    ros.publish_when_heard(ros.probe.trajectory, msg)
    assert ros.spin_until(lambda: len(ctrl.refs) == 1, 5.0), "trajectory not queued"
    assert ctrl.set_parameters([Parameter("knee.limits.link_speed", value=7.0)])[0].successful
    assert len(ctrl.refs) == 0 and ctrl.refs.rejected == 1
    assert ctrl.refs.last_issue.reason == ("knee: a queued reference reaches 7.69 rad/s, beyond the new 7.0 rad/s "
                                           "link speed limit; dropped")
