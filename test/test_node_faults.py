"""Fault injection against the controller node, in one process: each case is an attack a test
engineer made on the node (bad drivers, jittery clocks, careless operators) and failed on the
code before it. Bounded: sim time where the case allows it, every wait with a deadline.

References: the design notes' safety contract (section 5), restated per case; the bundled
parameter file's limits (config/one_joint.yaml); the command property check of
test/command_properties.py (finite, within the torque limit, within the slew limit over every
window of stamp time) applied to every command published in a case.
"""
import math
import time

import pytest
from rclpy.clock import ClockType
from rclpy.parameter import Parameter
from rclpy.qos import QoSProfile
from rosgraph_msgs.msg import Clock
from sensor_msgs.msg import JointState

from command_properties import Command, check_commands
from compliant_damping.io import config
from compliant_damping.control.safety import FaultCode
from node_harness import ros, seconds, stamp  # noqa: F401 (ros is a fixture)
from test_nodes_safety import BUNDLED, PERIOD, TIMEOUT, _active_controller, _answer, _set_clock, _state, _tick

pytestmark = pytest.mark.ros

LIMITS = {"knee_motor": config.controller_setup(BUNDLED).joints[0].limits}
SLEW = LIMITS["knee_motor"].torque_rate


def _safe_commands(ros, period=PERIOD):
    ns = [m.header.stamp.sec * 1_000_000_000 + m.header.stamp.nanosec for m in ros.probe.efforts]
    commands = [Command((k - ns[0]) * 1e-9, dict(zip(m.name, m.effort))) for k, m in zip(ns, ros.probe.efforts)]
    violations = check_commands(commands, LIMITS, period)
    assert not violations, violations[:5]


def _set(ctrl, **values):
    """Set parameters (dotted keys via '__'); returns the results."""
    return ctrl.set_parameters([Parameter(k.replace("__", "."), value=v) for k, v in values.items()])


def _settle(ros, ctrl, t0, n=20):
    for k in range(1, n + 1):
        _tick(ros, ctrl, t0 + k * PERIOD)
    return t0 + n * PERIOD


def test_burst_of_joint_states_cannot_exceed_the_slew_limit_per_second(ros):
    """Joint states every 0.1 ms of stamp time after a 0.3 rad reference step: within any 1 ms the
    command moves by at most torque_rate * 1 ms = 10 N m (the per-message rule gave 50 N m)."""
    ctrl = _active_controller(ros)
    t = _settle(ros, ctrl, 0.0)
    ros.publish_when_heard(ros.probe.reference, JointState(name=["knee"], position=[0.3], velocity=[0.0]))
    assert ros.spin_until(lambda: len(ctrl.refs) == 1, 5.0)
    first = len(ros.probe.efforts)
    for k in range(1, 31):
        _tick(ros, ctrl, t + k * 1e-4)
    taus = [m.effort[0] for m in ros.probe.efforts[first - 1:]]
    print(f"burst: command {taus[0]:.2f} -> {taus[-1]:.2f} N m over 3 ms of stamp time")
    assert abs(taus[-1] - taus[0]) <= SLEW * 3e-3 + 1e-9 and abs(taus[-1] - taus[0]) > 1.0
    _safe_commands(ros)


def test_jittery_and_backward_stamps_are_refused_or_bounded(ros):
    ctrl = _active_controller(ros)
    t = _settle(ros, ctrl, 0.0)
    _set_clock(ros, ctrl, t + 0.01)
    rejected = ctrl.stamp_rejected
    ros.probe.joint_states.publish(_state(t - 0.0005))  # older than the last answered
    assert ros.spin_until(lambda: ctrl.stamp_rejected == rejected + 1, 5.0)
    ros.probe.joint_states.publish(_state(t + 5.0))  # 5 s ahead of the clock
    assert ros.spin_until(lambda: ctrl.stamp_rejected == rejected + 2, 5.0)
    assert _answer(ros, t - 0.0005) is None and _answer(ros, t + 5.0) is None
    _tick(ros, ctrl, t + 0.002)  # normal stamps are answered again
    _safe_commands(ros)


def test_motor_damping_ignores_a_bogus_motor_speed(ros):
    """The bundled knee rests; the driver reports +12 rad/s (limit 10) for 100 ms with the motor
    position unchanged: safe mode commands zero (it commanded -24 N m, driving the link)."""
    ctrl = _active_controller(ros)
    t = _settle(ros, ctrl, 0.0)
    out = [_tick(ros, ctrl, t + k * PERIOD, dtheta=12.0) for k in range(1, 101)]
    assert ctrl.bank[0].fault.code is FaultCode.MOTOR_SPEED
    assert max(abs(tau) for tau in out) == 0.0
    out = [_tick(ros, ctrl, t + 0.1 + k * PERIOD, dtheta=-30.0) for k in range(1, 21)]
    assert max(abs(tau) for tau in out) == 0.0  # -30 rad/s: it commanded +40 N m
    _safe_commands(ros)


def test_limits_only_tighten_at_run_time_and_bad_changes_never_poison_later_ones(ros):
    ctrl = _active_controller(ros, lock_gains=True)
    for key, value in [("knee__limits__driver_torque", 1000.0), ("knee__limits__deflection", 100.0),
                       ("watchdog_timeout", 1e9), ("knee__limits__position_upper", 5.0),
                       ("knee__limits__motor_speed", math.inf), ("knee__limits__torque_rate", 2e4)]:
        result = _set(ctrl, **{key: value})[0]
        assert not result.successful and "only tighten" in result.reason, (key, result.reason)
    above_driver = _set(ctrl, knee__limits__torque=1000.0)[0]  # the driver rating could not be raised first
    assert not above_driver.successful and "driver" in above_driver.reason
    assert ctrl.setup.joints[0].limits == LIMITS["knee_motor"] and ctrl.setup.watchdog_timeout == TIMEOUT
    below_two_ticks = _set(ctrl, watchdog_timeout=1.5 * PERIOD)[0]
    assert not below_two_ticks.successful and "watchdog_timeout" in below_two_ticks.reason
    deleted = ctrl.set_parameters([Parameter("knee.limits.torque", Parameter.Type.NOT_SET)])[0]
    assert not deleted.successful and "deleted" in deleted.reason
    as_int = _set(ctrl, knee__limits__torque=40)[0]  # an int equal to the float value
    assert not as_int.successful and "float" in as_int.reason
    lowered = _set(ctrl, knee__limits__torque=30.0, watchdog_timeout=0.04)
    assert all(r.successful for r in lowered), [r.reason for r in lowered]
    assert ctrl.bank.filters[0].limits.torque == 30.0 and ctrl.watchdog.timeout == 0.04


def test_a_backward_clock_jump_cannot_delay_the_watchdog(ros):
    """Sim time jumps back 2 s after the last joint state: the fault comes within a steady-clock
    check period (it was delayed from 50 ms to 2050 ms). In real time the watchdog runs on the
    steady clock, which cannot jump at all."""
    ctrl = _active_controller(ros)
    t = _settle(ros, ctrl, 2.0)
    ros.probe.clock.publish(Clock(clock=stamp(t - 2.0)))
    start = time.monotonic()
    assert ros.spin_until(lambda: ctrl.bank[0].fault is not None, 2.0)
    print(f"backward jump detected after {time.monotonic() - start:.3f} s of wall time")
    assert ctrl.bank[0].fault.code is FaultCode.WATCHDOG and "clock went back" in ctrl.bank[0].fault.reason


def test_real_time_watchdog_runs_on_the_steady_clock(ros):
    ctrl = ros.controller(use_sim_time=False)
    assert ctrl.trigger_configure().name == "SUCCESS"
    assert ctrl._watchdog_timer.clock.clock_type == ClockType.STEADY_TIME


def test_deactivation_ramps_to_zero_however_long_it_takes(ros):
    """A 300 N m/s slew limit and about 10 N m of command: the ramp takes over 30 ms, longer than
    the watchdog timeout; it runs to zero at the slew limit and publishes the zero."""
    ctrl = _active_controller(ros, knee__limits__torque_rate=300.0)
    ros.publish_when_heard(ros.probe.reference, JointState(name=["knee"], position=[0.5], velocity=[0.0]))
    assert ros.spin_until(lambda: len(ctrl.refs) == 1, 5.0)
    t = _settle(ros, ctrl, 0.0, n=60)
    last = ros.probe.efforts[-1].effort[0]
    assert abs(last) >= 10.0
    assert ctrl.trigger_deactivate().name == "SUCCESS"
    ros.spin_for(0.3)
    ramp = [m.effort[0] for m in ros.probe.efforts if seconds(m.header.stamp) > t + 1e-9]
    print(f"ramp from {last:.2f} N m: {len(ramp)} steps")
    assert ramp[-1] == 0.0 and len(ramp) * PERIOD > TIMEOUT
    _safe_commands(ros)


def test_references_beyond_the_limits_are_clipped_or_refused(ros):
    ctrl = _active_controller(ros)
    t = _settle(ros, ctrl, 0.0)
    ros.publish_when_heard(ros.probe.reference, JointState(name=["knee"], position=[5.0], velocity=[0.0]))
    assert ros.spin_until(lambda: ctrl.refs.clipped == 1, 5.0)
    _tick(ros, ctrl, t + PERIOD)
    upper = LIMITS["knee_motor"].position_upper
    assert ctrl.refs.current[0].value.q == upper  # the law aims at the limit, not at 5 rad
    ros.probe.reference.publish(JointState(name=["knee"], position=[0.1], velocity=[1e6]))
    assert ros.spin_until(lambda: ctrl.refs.rejected == 1, 5.0) and len(ctrl.refs) == 0


def test_a_second_controller_on_the_command_topic_is_refused_and_faults_the_first(ros):
    first = _active_controller(ros)
    _settle(ros, first, 0.0, n=5)
    second = ros.controller()
    assert second.trigger_configure().name == "SUCCESS"
    assert ros.spin_until(lambda: first.bank[0].fault is not None, 5.0)
    assert first.bank[0].fault.code is FaultCode.COMMAND_CONFLICT
    assert second.trigger_activate().name != "SUCCESS"  # refused: another publisher


def test_a_stuck_stamp_is_its_own_fault(ros):
    """Messages keep coming, all with the same stamp: the fault says so (it said 'no joint state')."""
    ctrl = _active_controller(ros)
    t = _settle(ros, ctrl, 0.0)
    for k in range(1, 80):
        _set_clock(ros, ctrl, t + k * PERIOD)
        ros.probe.joint_states.publish(_state(t))
        ros.spin_for(0.002)
        if ctrl.bank[0].fault is not None:
            break
    assert ctrl.bank[0].fault.code is FaultCode.STAMP_STUCK


def test_activation_before_any_joint_state_does_not_latch(ros):
    """Activated, then 0.7 s of sim time and 1 s of wall time without joint states (the watchdog
    timeout is 50 ms): no fault, the diagnostics say it waits, and the first state is answered."""
    ctrl = _active_controller(ros)
    for k in range(1, 36):
        _set_clock(ros, ctrl, 0.02 * k)
        ros.spin_for(0.03)
    assert ctrl.bank[0].fault is None
    waiting = [s for d in ros.probe.diagnostics for s in d.status]
    assert waiting and all(s.values[1].value == "waiting for joint states" for s in waiting)
    assert _tick(ros, ctrl, 0.7 + PERIOD) == 0.0 and ctrl.bank[0].fault is None


def test_joint_state_storm_keeps_latency_bounded_and_counts_drops(ros):
    """Bursts of 10 joint states published back to back (as fast as this process can: about 1 ms
    apart here) for 0.5 s, stamped with the node clock, against a controller in real time: the
    newest sample is used, the rest are dropped and counted, the state-to-command latency stays
    bounded (it grew to 75-225 ms under a 10 kHz storm), and the watchdog does not trip. Its timeout
    is 0.2 s here, not the bundled 50 ms: the storm's publisher shares this process with the
    controller, and a stall of this one process (83 ms once, with other tests loading both cores)
    would trip a 50 ms watchdog whatever the storm did; a starved controller still trips it."""
    ctrl = ros.controller(use_sim_time=False, watchdog_timeout=0.2)
    assert ctrl.trigger_configure().name == "SUCCESS" and ctrl.trigger_activate().name == "SUCCESS"
    assert ros.spin_until(lambda: ros.probe.joint_states.get_subscription_count() > 0, 5.0)
    for sub in [s for s in ros.probe.node.subscriptions if s.topic_name.endswith("/joint_states")]:
        ros.probe.node.destroy_subscription(sub)  # one executor: a storm on the probe's own reader would starve it
    clock = ros.probe.node.get_clock()
    sent, received = {}, []
    ros.probe.node.create_subscription(JointState, "motor_effort", lambda m: received.append(
        (time.monotonic(), m.header.stamp.sec * 1_000_000_000 + m.header.stamp.nanosec)), QoSProfile(depth=1000))
    end = time.monotonic() + 0.5
    while time.monotonic() < end:
        for _ in range(10):
            now = clock.now()
            msg = _state(0.0)
            msg.header.stamp = now.to_msg()
            sent[now.nanoseconds] = time.monotonic()
            ros.probe.joint_states.publish(msg)
        ros.spin_for(1e-3)
    ros.spin_for(0.01)
    latencies = sorted(arrival - sent[ns] for arrival, ns in received if ns in sent)
    assert len(latencies) > 20 and ctrl.bank[0].fault is None
    p99 = latencies[int(0.99 * len(latencies))]
    print(f"storm: {len(sent)} sent, {len(latencies)} answered, {ctrl.dropped} counted as dropped, "
          f"state-to-command latency p50 {latencies[len(latencies) // 2] * 1e3:.2f} ms, p99 {p99 * 1e3:.2f} ms")
    assert ctrl.dropped > 0 and p99 < 0.05
    _safe_commands(ros)


def test_a_stopped_sim_clock_is_caught_on_the_steady_clock(ros):
    """Lock step without its simulated joint: /clock and joint states stop, so sim time stands
    still and no sim-time watchdog can fire. watchdog.stall_timeout (2 s for the bundled 50 ms)
    of steady time later the controller faults (it stayed active, commanding, for ever)."""
    ctrl = _active_controller(ros)
    _settle(ros, ctrl, 0.0)
    start = time.monotonic()
    assert ros.spin_until(lambda: ctrl.bank[0].fault is not None, 5.0)
    waited = time.monotonic() - start
    print(f"stopped sim clock caught after {waited:.2f} s of wall time")
    assert ctrl.bank[0].fault.code is FaultCode.CLOCK_STOPPED and 2.0 <= waited <= 2.0 + 0.5


def test_a_fault_is_logged_once_with_its_code_and_reason(ros, capfd):
    ctrl = _active_controller(ros)
    t = _settle(ros, ctrl, 0.0, n=5)
    for k in range(1, 6):
        _tick(ros, ctrl, t + k * PERIOD, theta=0.5)  # deflection 0.5 rad, limit 0.15 rad
    assert ctrl.bank[0].fault.code is FaultCode.DEFLECTION
    logged = [line for line in capfd.readouterr().err.splitlines() if "safe mode" in line]
    assert len(logged) == 1 and "deflection: spring deflection +0.5 rad" in logged[0], logged
