"""JointController: bumpless law switching, linear gain ramps and motor inertia shaping fade-in.

References outside the code under test: the slew contract |delta tau| <= rate * dt (design notes,
section 5), linear interpolation of gains worked by hand, and Tomei's collocated PD torque
K (theta_d - theta) - D (theta' - theta_d') + g(q_d) written out by hand.
"""
import math
from dataclasses import replace

import pytest

from compliant_damping.io import config
from compliant_damping.sim import scenarios, simulate
from compliant_damping.control.controller import JointController
from compliant_damping.control.scheduled_law import blend_gains
from compliant_damping.control.laws import Gains, LinkDamping, NominalModel
from compliant_damping.control.safety import Limits
from compliant_damping.control.sample import JointSample, Reference

CTRL, SIM = config.load(config.bundled())
JOINT = CTRL.joints[0]
DT = 1.0 / CTRL.control_rate
GAINS = replace(JOINT.gains, link_stiffness=50.0)  # decoupled_impedance needs a link stiffness to differ


class Scripted:
    """A JointController for simulate(): runs scripted actions at given times, records every tick.

    ``raw`` is the law's torque as handed to the safety filter, ``cmd`` the command sent.
    """

    def __init__(self, law, actions, gains=GAINS):
        self.ctrl = JointController(law, JOINT.model, gains, JOINT.limits, CTRL.safe_mode)
        self.actions = sorted(actions, key=lambda a: a[0])
        self.raw, self.cmd, self.t, self.dq, self.marks = [], [], [], [], []
        inner = self.ctrl.safety.filter_checked

        def recording_filter(s, fault, tau, t):
            self.raw.append(tau)
            return inner(s, fault, tau, t)
        self.ctrl.safety.filter_checked = recording_filter

    @property
    def fault(self):
        return self.ctrl.fault

    @property
    def law_name(self):
        return self.ctrl.law_name

    def step(self, s, ref, t, dt):
        while self.actions and self.actions[0][0] <= t + 1e-12:
            self.actions.pop(0)[1](self.ctrl, t)
            self.marks.append(len(self.cmd))  # index of the first tick after the action
        self.t.append(t)
        self.dq.append(s.dq)
        self.cmd.append(self.ctrl.step(s, ref, t, dt))
        return self.cmd[-1]


def run(scenario, law, actions, duration, gains=GAINS):
    rec = Scripted(law, actions, gains)
    simulate.simulate(SIM.joints, [rec], scenarios.make(scenario, SIM.joints), duration,
                      control_dt=DT, substeps=SIM.substeps)
    assert rec.fault is None, rec.fault
    return rec


def switch(law):
    return lambda ctrl, t: ctrl.switch_law(law)


SWITCHES = [
    ("end_stop_impact", "motor_pd", ["decoupled_damper", "decoupled_impedance", "link_damping", "decoupled_damper"]),
    ("end_stop_impact", "link_damping", ["decoupled_impedance", "motor_pd", "decoupled_damper", "zero"]),
    ("setpoint_step", "decoupled_damper", ["motor_pd", "decoupled_impedance", "decoupled_damper", "link_damping"]),
]


@pytest.mark.parametrize("scenario, first, then", SWITCHES)
def test_law_switch_while_moving_is_bumpless(scenario, first, then):
    check_switches(scenario, first, then, GAINS)


def test_law_switch_to_second_order_damper_is_bumpless():
    """Same with a virtual damper mass: two law states (x, x'), the first one solved for the torque."""
    check_switches("end_stop_impact", "motor_pd", ["decoupled_damper", "link_damping", "decoupled_impedance", "motor_pd"],
                   replace(GAINS, virtual_mass=0.02))


def check_switches(scenario, first, then, gains):
    times = [0.13, 0.27, 0.41, 0.55] if scenario == "setpoint_step" else [0.2, 0.3, 0.38, 0.47]
    rec = run(scenario, first, [(t, switch(law)) for t, law in zip(times, then)], 0.6, gains)
    budget = JOINT.limits.torque_rate * DT
    steps = [abs(b - a) for a, b in zip(rec.cmd, rec.cmd[1:])]
    assert max(steps) <= budget * (1 + 1e-12)  # the filter's slew contract, every tick
    for k, law in zip(rec.marks, then):
        assert abs(rec.dq[k]) > 0.02, "the joint should be moving at the switch"
        assert abs(rec.cmd[k] - rec.cmd[k - 1]) <= budget * (1 + 1e-12)
        if law in ("decoupled_damper", "decoupled_impedance"):
            # LawRunner's bumpless initialisation: the new law's own torque equals the last command
            assert rec.raw[k] == pytest.approx(rec.cmd[k - 1], abs=1e-6)
            assert rec.cmd[k] == pytest.approx(rec.cmd[k - 1], abs=1e-6)


def test_switch_jump_is_real_without_bumpless_states():
    """Sanity check that the test above can fail: motor_pd after a decoupled law does jump (raw)."""
    rec = run("end_stop_impact", "decoupled_damper", [(0.43, switch("motor_pd"))], 0.5)
    k = rec.marks[0]
    assert abs(rec.raw[k] - rec.cmd[k - 1]) > 0.1


# ---- gain ramps --------------------------------------------------------------------------------

MODEL = NominalModel(link_inertia=0.25, motor_inertia=0.15, spring_stiffness=300.0, gravity_torque=2.0)
WIDE = Limits(torque=1e6, torque_rate=1e9, deflection=1.0)
S = JointSample(0.1, 0.4, 0.13, -0.7)
REF = Reference(0.3, 0.2, 0.0)


def pd_torque(k, d, s=S, ref=REF, m=MODEL):
    """Tomei's PD with gravity compensation by hand: theta_d = q_d + g(q_d)/k_s."""
    q_d, dq_d = ref.q, ref.dq
    g_d = m.gravity_torque * math.sin(q_d)
    theta_d = q_d + g_d / m.spring_stiffness
    dtheta_d = dq_d * (1.0 + m.gravity_torque * math.cos(q_d) / m.spring_stiffness)
    return k * (theta_d - s.theta) - d * (s.dtheta - dtheta_d) + g_d


@pytest.mark.parametrize("frac", [0.0, 0.25, 0.5, 1.0, 1.5])
def test_set_gains_ramps_linearly(frac):
    """K 100 -> 300 and D 5 -> 15 over 0.4 s: at a fraction w, K = 100 + 200 w (by hand)."""
    c = JointController("motor_pd", MODEL, Gains(motor_stiffness=100.0, motor_damping=5.0), WIDE)
    assert c.step(S, REF, 0.0, DT) == pytest.approx(pd_torque(100.0, 5.0), rel=1e-12)
    c.set_gains(Gains(motor_stiffness=300.0, motor_damping=15.0), t=1.0, ramp_time=0.4)
    w = min(frac, 1.0)
    assert c.step(S, REF, 1.0 + 0.4 * frac, DT) == pytest.approx(pd_torque(100.0 + 200.0 * w, 5.0 + 10.0 * w), rel=1e-12)


def test_set_gains_before_first_reading_still_ramps():
    """A ramp requested before any reading runs from the old gains as well: halfway is halfway."""
    c = JointController("motor_pd", MODEL, Gains(motor_stiffness=100.0, motor_damping=5.0), WIDE)
    c.set_gains(Gains(motor_stiffness=300.0, motor_damping=15.0), t=0.0, ramp_time=1.0)
    assert c.step(S, REF, 0.5, DT) == pytest.approx(pd_torque(200.0, 10.0), rel=1e-12)
    assert c.step(S, REF, 0.75, DT) == pytest.approx(pd_torque(250.0, 12.5), rel=1e-12)


def test_ramp_continues_after_reset():
    """A reset during a ramp restarts the law on the ramp's current gains, not its end."""
    c = JointController("motor_pd", MODEL, Gains(motor_stiffness=100.0, motor_damping=5.0), WIDE)
    c.step(S, REF, 0.0, DT)
    c.set_gains(Gains(motor_stiffness=300.0, motor_damping=15.0), t=0.0, ramp_time=1.0)
    c.stop()
    c.step(S, REF, 0.1, DT)
    assert c.reset() is None
    assert c.step(S, REF, 0.5, DT) == pytest.approx(pd_torque(200.0, 10.0), rel=1e-12)


def test_blend_gains_halfway_by_hand():
    old = Gains(motor_stiffness=100.0, motor_damping=4.0, link_damping=2.0, link_stiffness=0.0,
                decoupling_stiffness=50.0)
    new = Gains(motor_stiffness=300.0, motor_damping=8.0, link_damping=6.0, link_stiffness=40.0,
                decoupling_stiffness=150.0, motor_inertia_target=0.05)
    mid = blend_gains(old, new, 0.5, motor_inertia=0.15)
    # unset shaping target (0) blends as the nominal motor inertia 0.15: (0.15 + 0.05)/2 = 0.1
    assert mid == Gains(motor_stiffness=200.0, motor_damping=6.0, link_damping=4.0, link_stiffness=20.0,
                        decoupling_stiffness=100.0, motor_inertia_target=pytest.approx(0.1))


def _ramp(gains, t0, duration):
    return (t0, lambda ctrl, t: ctrl.set_gains(gains, t, duration))


@pytest.mark.parametrize("law", ["decoupled_damper", "link_damping"])
def test_gain_ramp_in_motion_does_not_jump(law):
    """The law's torque at the ramp's start equals the unramped run's; a 0 s ramp jumps instead.
    Changed 30 ms after a set-point step, while the link moves towards the new set point."""
    new = replace(GAINS, link_damping=3.0 * GAINS.link_damping, decoupling_stiffness=300.0)
    t0 = 0.13
    base = run("setpoint_step", law, [], 0.3)
    ramped = run("setpoint_step", law, [_ramp(new, t0, 0.1)], 0.3)
    instant = run("setpoint_step", law, [_ramp(new, t0, 0.0)], 0.3)
    k = ramped.marks[0]
    assert ramped.raw[:k + 1] == pytest.approx(base.raw[:k + 1], abs=1e-9)
    jump = abs(instant.raw[k] - base.raw[k])
    assert jump > 1.0  # the gain change is large enough to matter
    # during the ramp the law's torque departs from the unramped one gradually
    drift = [abs(a - b) for a, b in zip(ramped.raw[k:k + 5], base.raw[k:k + 5])]
    assert max(drift) < 0.2 * jump


# ---- motor inertia shaping -------------------------------------------------------------------

def test_motor_inertia_shaping_fades_in_linearly():
    """B_d ramps from the nominal B (an unset target) to 0.05 kg m^2: halfway the law uses 0.1 (by hand)."""
    g0 = Gains(motor_stiffness=200.0, motor_damping=10.0, link_damping=5.0)
    c = JointController("link_damping", MODEL, g0, WIDE)
    c.step(S, REF, 0.0, DT)
    c.set_gains(replace(g0, motor_inertia_target=0.05), t=1.0, ramp_time=0.2)
    # w = 0: shaping with B_d = B is the unshaped law, (B/B) u2 + 0
    assert c.step(S, REF, 1.0, DT) == pytest.approx(LinkDamping(MODEL, g0).output(S, REF, ()), rel=1e-12)
    half = c.step(S, REF, 1.1, DT)
    assert half == pytest.approx(LinkDamping(MODEL, replace(g0, motor_inertia_target=0.1)).output(S, REF, ()), rel=1e-9)
    assert half != pytest.approx(LinkDamping(MODEL, g0).output(S, REF, ()), rel=1e-3)  # shaping matters here


def test_motor_inertia_shaping_ramp_in_motion_does_not_jump():
    shaped = replace(GAINS, motor_inertia_target=0.05)
    t0 = 0.43
    base = run("end_stop_impact", "decoupled_damper", [], 0.6)
    ramped = run("end_stop_impact", "decoupled_damper", [_ramp(shaped, t0, 0.1)], 0.6)
    instant = run("end_stop_impact", "decoupled_damper", [_ramp(shaped, t0, 0.0)], 0.6)
    k = ramped.marks[0]
    assert ramped.raw[:k + 1] == pytest.approx(base.raw[:k + 1], abs=1e-9)
    jump = abs(instant.raw[k] - base.raw[k])
    drift = [abs(a - b) for a, b in zip(ramped.raw[k:k + 5], base.raw[k:k + 5])]
    assert jump > 0.5 and max(drift) < 0.2 * jump

