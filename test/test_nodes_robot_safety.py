"""Controller node safety on the bundled three-joint leg (a URDF robot), in one process on sim time:
the watchdog, ~/stop, ~/reset_fault and the lifecycle, as test_nodes_safety.py checks them for
one joint.

Expected values come from the design notes' safety rules (section 5: every joint of a coupled
robot in safe mode at once, leaving a fault needs an explicit reset with fresh readings, the
safe mode's motor damping, deactivation ramps the torque to zero at the slew limit) and the
leg's parameter file (limits per joint); the watchdog bound "timeout plus two periods" is the
requirement stated for the node. The rest state is the one the offline simulators start from
(scenarios.rest_state: each spring carries its link's gravity).
"""
import pytest

pytest.importorskip("pinocchio", reason="URDF chains need Pinocchio (the pin package)")

from rosgraph_msgs.msg import Clock  # noqa: E402
from sensor_msgs.msg import JointState  # noqa: E402

from compliant_damping.control.safety import FaultCode  # noqa: E402
from compliant_damping.io import config  # noqa: E402
from compliant_damping.io.joint_state_codec import encode_states  # noqa: E402
from compliant_damping.control.sample import JointSample  # noqa: E402
from compliant_damping.nodes.controller_node import ControllerNode  # noqa: E402
from compliant_damping.nodes.simulated_joint_node import SimulatedJointNode  # noqa: E402
from compliant_damping.sim import scenarios  # noqa: E402
from node_harness import ros, seconds, stamp  # noqa: E402,F401 (ros is a fixture)

pytestmark = pytest.mark.ros

LEG_FILE = config.bundled("compliant_leg.yaml")
LEG_DOC = config.read(LEG_FILE)
LEG_CTRL, LEG = config.load(LEG_FILE)
PERIOD = 1.0 / LEG_CTRL.control_rate
TIMEOUT = LEG_CTRL.watchdog_timeout
REST = scenarios.rest_state(LEG.joints, LEG.links)  # (3, 4): q, q', theta, theta' per joint
SLEW = [j.limits.torque_rate * PERIOD for j in LEG_CTRL.joints]  # N m per tick


def _controller(ros):
    ctrl = ros.start(ControllerNode, {**config.node_parameters(LEG_DOC, config.CONTROLLER_NODE), "use_sim_time": True})
    assert ctrl.trigger_configure().name == "SUCCESS"
    return ctrl


def _tick(ros, ctrl, t):
    """Clock to t, the leg's rest state stamped t; returns the answering efforts (N m, joint order)."""
    ros.probe.clock.publish(Clock(clock=stamp(t)))
    assert ros.spin_until(lambda: ctrl.get_clock().now().nanoseconds == round(t * 1e9), 5.0), "clock not heard"
    readings = [JointSample(*row, j.plant.spring_stiffness * (row[2] - row[0])) for row, j in zip(REST, LEG.joints)]
    name, pos, vel, eff = encode_states(LEG.joint_names, readings, [0.0] * 3)
    msg = JointState(name=name, position=pos, velocity=vel, effort=eff)
    msg.header.stamp = stamp(t)
    ros.probe.joint_states.publish(msg)
    assert ros.spin_until(lambda: _answer(ros, t) is not None, 5.0), f"no command for t={t}"
    return list(_answer(ros, t).effort)


def _answer(ros, t):
    return next((m for m in ros.probe.efforts if seconds(m.header.stamp) == pytest.approx(t, abs=1e-9)), None)


def test_the_watchdog_trips_every_leg_joint_and_a_reset_needs_fresh_states(ros):
    ctrl = _controller(ros)
    assert ctrl.trigger_activate().name == "SUCCESS"
    ros.publish_when_heard(ros.probe.clock, Clock(clock=stamp(0.0)))
    assert ros.spin_until(lambda: ros.probe.joint_states.get_subscription_count() > 0, 5.0)
    t_last = 0.0
    for k in range(1, 21):
        t_last = k * PERIOD
        holding = _tick(ros, ctrl, t_last)
    assert ctrl.bank.faults == [None] * 3 and max(map(abs, holding)) > 1.0  # the law holds the leg up
    n_before = len(ros.probe.efforts)
    t = t_last
    while ctrl.bank.faults[0] is None and t < t_last + 3 * TIMEOUT:  # joint states stop; time goes on
        t += PERIOD
        ros.probe.clock.publish(Clock(clock=stamp(t)))
        ros.spin_until(lambda: ctrl.bank.faults[0] is not None, 0.05)
    assert [f.code for f in ctrl.bank.faults] == [FaultCode.WATCHDOG] * 3
    assert ros.spin_until(lambda: len(ros.probe.efforts) > n_before, 5.0)
    first_safe = ros.probe.efforts[n_before]
    reaction = seconds(first_safe.header.stamp) - t_last
    print(f"leg watchdog reaction: {reaction * 1e3:.1f} ms; first safe command {list(first_safe.effort)} N m")
    assert TIMEOUT - 1e-9 <= reaction <= TIMEOUT + 2 * PERIOD + 1e-9
    assert all(abs(a - b) <= s + 1e-9 for a, b, s in zip(first_safe.effort, holding, SLEW))  # slew-limited

    refused = ros.probe.trigger(ros, "reset_fault")
    assert not refused.success and all(f"{n}: no fresh joint state" in refused.message for n in LEG.joint_names)
    for _ in range(3):
        t += PERIOD
        _tick(ros, ctrl, t)
    assert ros.probe.trigger(ros, "reset_fault").success and ctrl.bank.faults == [None] * 3
    t += PERIOD
    resumed = _tick(ros, ctrl, t)
    before = list(ros.probe.efforts[-2].effort)
    assert all(abs(a - b) <= s + 1e-9 for a, b, s in zip(resumed, before, SLEW))  # bumpless within the slew limit


def test_stop_reset_and_deactivation_act_on_every_leg_joint(ros):
    """The leg in lock step with the simulated robot node: ~/stop puts all three joints in safe
    mode (after the ramp each command is -safe_damping theta' of the state it answers); a reset
    resumes the law holding the measured positions; deactivation ramps all three to zero at the
    slew limit (20000 N m/s on each joint: one tick from the holding torques here) and then
    publishes nothing."""
    ctrl = _controller(ros)
    sim = ros.start(SimulatedJointNode, {**config.node_parameters(LEG_DOC, config.SIM_NODE), "lock_step": True})
    ros.spin_for(0.3)
    assert ros.probe.efforts == [] and sim.plant.ticks == 0  # inactive: silent, the leg waits
    assert ctrl.trigger_activate().name == "SUCCESS"
    assert ros.spin_until(lambda: sim.plant.ticks >= 100, 60.0)
    assert ros.probe.trigger(ros, "stop").success
    assert ros.spin_until(lambda: sim.plant.ticks >= 250, 60.0)
    assert [f.code for f in ctrl.bank.faults] == [FaultCode.STOP_REQUESTED] * 3
    last = ros.probe.efforts[-1]
    state = next(m for m in ros.probe.states if m.header.stamp == last.header.stamp)
    motor_speed = [state.velocity[list(state.name).index(f"{n}_motor")] for n in LEG.joint_names]
    damping = [j.limits.safe_damping for j in LEG_CTRL.joints]
    assert list(last.effort) == pytest.approx([-d * w for d, w in zip(damping, motor_speed)], abs=1e-12)

    assert ros.probe.trigger(ros, "reset_fault").success and ctrl.bank.faults == [None] * 3
    q_reset, ticks = sim.plant.x[:, 0].copy(), sim.plant.ticks
    assert ros.spin_until(lambda: sim.plant.ticks >= ticks + 400, 60.0)
    held = abs(sim.plant.x[:, 0] - q_reset).max()
    print(f"leg stop/reset: sagged to {q_reset.round(4)} rad in safe mode, held within {held:.4f} rad after the reset")
    assert abs(q_reset - REST[:, 0]).max() > 0.01  # the leg sagged in safe mode (gravity against motor damping)
    assert ctrl.bank.faults == [None] * 3 and held < 0.01

    answered = ctrl.last_answered_ns
    assert ctrl.trigger_deactivate().name == "SUCCESS"
    ros.spin_for(0.5)
    by_stamp = [(round(seconds(m.header.stamp) * 1e9), list(m.effort)) for m in ros.probe.efforts]
    last_active = next(tau for ns, tau in by_stamp if ns == answered)
    ramp = [tau for ns, tau in by_stamp if ns > answered]
    print(f"leg deactivation: {last_active} N m, then {ramp}")
    assert max(map(abs, last_active)) > 1.0 and ramp and ramp[-1] == [0.0] * 3
    for a, b in zip([last_active] + ramp, ramp):
        assert all(abs(y - x) <= s + 1e-9 for x, y, s in zip(a, b, SLEW))
    count = len(ros.probe.efforts)
    ros.spin_for(0.5)
    assert len(ros.probe.efforts) == count
