"""Safety filter and JointController: property tests over hostile inputs, plus unit tests.

The reference for every check is the safety contract of the design notes (section 5), written
out here by hand: saturation |tau| <= tau_max; slew in stamp time, |tau_j - tau_i| <= rate *
(T_j - T_i) for any two commands, where T is the running maximum of the stamps (the monotonic
time a burst or a backward stamp cannot add to), the first command moving by at most one period
and one after a gap by at most two periods' worth; non-finite input => fault; a latching fault
cleared only by reset() within limits; motor-damping safe mode never feeds power into the
motor (tau * theta' <= 0, the definition of a brake). For joint-state decoding, the interface
rule of joint_state_codec's notes, written out by hand. Float comparisons allow a few units in
the last place (math.ulp), the rounding of the additions.
"""
import math
from types import SimpleNamespace

import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from compliant_damping.control.controller import JointController
from compliant_damping.io.joint_state_codec import Rejection, StateDecoder
from compliant_damping.control.laws import LAW_NAMES, Gains, NominalModel
from compliant_damping.control.safety import MAX_RAMP_DOWN, Fault, FaultCode, Limits, SafetyFilter
from compliant_damping.control.sample import JointSample, Reference
from compliant_damping.control.watchdog import ClockStall, Watchdog

PROPERTY = settings(max_examples=2000, deadline=None)
NAN, INF = math.nan, math.inf
PERIOD = 1e-3

# Readings and torques: ordinary numbers mixed with NaN, +/-inf, huge and denormal values.
SPECIAL = st.sampled_from([NAN, INF, -INF, 1e300, -1e300, 5e-324, -5e-324, 0.0])
anything = st.one_of(SPECIAL, st.floats(-2.0, 2.0), st.floats(allow_nan=True, allow_infinity=True))
mostly_finite = st.one_of(st.floats(-0.5, 0.5), st.floats(-0.5, 0.5), anything)
# Stamp increments: 0 (repeat), bursts far faster than the period, jitter, gaps, backwards, NaN, inf.
steps = st.one_of(st.sampled_from([0.0, 5e-324, 1e-7, 1e-4, 1e-3, 1.5e-3, 0.05, 1e300, -1e-3, -5.0, NAN, INF]),
                  st.floats(-2e-3, 0.1))


@st.composite
def limits(draw):
    """Valid Limits as config.build accepts them (positive limits finite, speeds may be inf)."""
    lower = draw(st.one_of(st.just(-INF), st.floats(-2.0, 0.0)))
    upper = draw(st.one_of(st.just(INF), st.floats(0.001, 2.0)))
    speed = st.one_of(st.just(INF), st.floats(0.01, 50.0))
    torque = draw(st.floats(1e-3, 1e3))
    return Limits(torque=torque, torque_rate=draw(st.floats(torque / MAX_RAMP_DOWN, 1e6)),
                  deflection=draw(st.floats(1e-3, 1.0)), position_lower=lower, position_upper=upper,
                  link_speed=draw(speed), motor_speed=draw(speed),
                  safe_damping=draw(st.one_of(st.just(0.0), st.floats(0.0, 1e12))),
                  driver_torque=draw(st.one_of(st.just(INF), st.floats(torque, 2e3))))


samples = st.builds(JointSample, mostly_finite, mostly_finite, mostly_finite, mostly_finite, anything)
ticks = st.lists(st.tuples(samples, anything, steps), min_size=1, max_size=8)


class SlewContract:
    """The slew contract by hand. The budget of command k is torque_rate times its window:
    one period for the first command with a finite stamp, then the advance of the running
    maximum of the stamps, capped at MAX_GAP periods; nothing for a non-finite stamp. Any two
    commands i < k differ by at most the budgets between them (every window of stamp time)."""

    def __init__(self, lim: Limits, period: float = PERIOD):
        self.lim, self.period = lim, period
        self.history = []   # (cumulative budget time s, command N m)
        self.newest = None
        self.total = 0.0

    def check(self, t: float, tau: float) -> None:
        lim = self.lim
        assert math.isfinite(tau) and abs(tau) <= lim.torque
        if math.isfinite(t):
            if self.newest is None:
                window, self.newest = self.period, t
            else:
                window = min(max(t - self.newest, 0.0), MAX_GAP * self.period)
                self.newest = max(self.newest, t)
            self.total += window
        previous = [(0.0, 0.0)] + self.history  # before the first command the torque is zero
        for total_i, tau_i in previous:
            budget = lim.torque_rate * (self.total - total_i)
            assert abs(tau - tau_i) <= budget + 8 * math.ulp(max(abs(tau), abs(tau_i), lim.torque, budget))
        self.history.append((self.total, tau))


MAX_GAP = 2.0  # periods a step after a gap may use (the module's MAX_SLEW_WINDOW, stated here by hand)


def bad(s: JointSample) -> bool:
    return not all(math.isfinite(v) for v in s[:4])


def stamps(increments, start=1.0):
    t = start
    for d in increments:
        t = t + d if math.isfinite(t) else 1.0 + d
        yield t


@PROPERTY
@given(limits(), st.sampled_from(["zero_torque", "motor_damping"]), ticks)
def test_filter_output_finite_saturated_slew_limited_in_stamp_time(lim, mode, seq):
    f = SafetyFilter(lim, mode, PERIOD)
    contract = SlewContract(lim)
    for (s, tau, _), t in zip(seq, stamps(d for _, _, d in seq)):
        had_fault = f.fault
        out = f.filter(s, tau, t)
        contract.check(t, out)
        assert out == f.last_torque
        if bad(s) or not math.isfinite(tau):
            assert isinstance(f.fault, Fault) and f.fault.reason
        if had_fault is not None:
            assert f.fault == had_fault  # latched: the first fault stays
        if f.fault is not None:  # safe mode brakes, never drives: target power <= 0
            assert f.safe_target(s) * s.dtheta <= 0.0 or not math.isfinite(s.dtheta)
            assert abs(f.safe_target(s)) <= lim.torque


def test_burst_of_joint_states_cannot_add_slew_budget():
    """Joint states every 0.1 ms asking for a 50 N m step: within 1 ms of stamp time the command
    moves by at most torque_rate * 1 ms = 10 N m (the per-message rule let it move 50 N m)."""
    lim = Limits(torque=40.0, torque_rate=10000.0)
    f = SafetyFilter(lim, "zero_torque", PERIOD)
    s = JointSample(0.0, 0.0, 0.0, 0.0)
    f.filter(s, 0.0, 0.0)
    out = [f.filter(s, 50.0, 1e-4 * k) for k in range(1, 11)]
    assert out[-1] == pytest.approx(10.0, abs=1e-9) and max(out) <= 10.0 + 1e-9


def test_jittery_and_backward_stamps_cannot_add_slew_budget():
    """1 kHz with stamps jittering by +-0.9 ms and going backwards: the change over the window of
    stamp time [0, T_max] stays within torque_rate * T_max."""
    lim = Limits(torque=60.0, torque_rate=10000.0)
    f = SafetyFilter(lim, "zero_torque", PERIOD)
    s = JointSample(0.0, 0.0, 0.0, 0.0)
    f.filter(s, 0.0, 0.0)
    times = [0.0019, 0.0011, 0.0029, 0.0021, 0.0039, 0.0031, 0.0049, 0.0041]
    out = [f.filter(s, 60.0, t) for t in times]
    assert max(out) == pytest.approx(10000.0 * 0.0049, abs=1e-9)


def test_first_command_after_a_gap_is_capped_at_two_periods():
    lim = Limits(torque=40.0, torque_rate=10000.0)
    f = SafetyFilter(lim, "zero_torque", PERIOD)
    s = JointSample(0.0, 0.0, 0.0, 0.0)
    assert f.filter(s, 40.0, 0.0) == pytest.approx(10.0)   # first command: one period of slew
    assert f.filter(s, 40.0, 0.030) == pytest.approx(30.0)  # 30 ms gap: two periods, not 300 N m
    assert f.filter(s, 40.0, 0.031) == pytest.approx(40.0)


@PROPERTY
@given(limits(), st.floats(1e-3, 1e3), st.lists(st.tuples(anything, steps), min_size=1, max_size=8))
def test_lowered_torque_limit_wins_over_slew(lim, start, seq):
    """After the torque limit is lowered, limit() clips again: |tau| <= the new limit at once."""
    f = SafetyFilter(Limits(torque=1e3, torque_rate=1e12), "zero_torque", PERIOD)
    f.limit(start, 0.0)
    assert f.last_torque == start
    f.limits = lim
    for tau, t in zip((tau for tau, _ in seq), stamps(d for _, d in seq)):
        assert abs(f.limit(tau, t)) <= lim.torque


def test_lowered_torque_limit_applies_at_once():
    f = SafetyFilter(Limits(torque=10.0, torque_rate=100.0), period=0.01)
    for k in range(10):
        f.limit(8.0, 0.01 * k)
    assert f.last_torque == pytest.approx(8.0)
    f.limits = Limits(torque=2.0, torque_rate=100.0)
    assert f.limit(8.0, 0.09) == 2.0  # no slew budget (same stamp), yet the new limit holds
    assert f.limit(-8.0, 0.10) == pytest.approx(1.0)  # then 1 N m per tick again


@PROPERTY
@given(limits(), st.sampled_from(["zero_torque", "motor_damping"]), ticks, samples)
def test_fault_latches_until_reset_within_limits(lim, mode, seq, last):
    f = SafetyFilter(lim, mode, PERIOD)
    for (s, tau, _), t in zip(seq, stamps(d for _, _, d in seq)):
        f.filter(s, tau, t)
    stop = Fault(FaultCode.STOP_REQUESTED, "test stop")
    f.trip(stop)
    reason = f.fault
    f.filter(last, 0.0, 1e9)  # a reading in fault does not clear it, whatever it is
    assert f.fault == reason
    refused = f.reset()
    if f.check(last) is not None:
        # the last reading violates a limit (or is non-finite): reset refuses with the fault that stays
        assert isinstance(refused, Fault) and refused.reason and f.fault == reason
    else:
        assert refused is None and f.fault is None


law_names = st.sampled_from(LAW_NAMES)
refs = st.builds(Reference, mostly_finite, mostly_finite, mostly_finite, mostly_finite, mostly_finite)
gains = st.builds(Gains, motor_stiffness=st.floats(0.0, 1e3), motor_damping=st.floats(0.0, 50.0),
                  link_damping=st.floats(0.1, 50.0), link_stiffness=st.floats(0.0, 500.0),
                  decoupling_stiffness=st.floats(1.0, 1e4),
                  virtual_mass=st.one_of(st.just(0.0), st.floats(1e-3, 1.0)),
                  motor_inertia_target=st.one_of(st.just(0.0), st.floats(1e-3, 1.0)))
MODEL = NominalModel(link_inertia=0.25, motor_inertia=0.15, spring_stiffness=300.0, gravity_torque=2.0)


@PROPERTY
@given(law_names, gains, limits(), st.sampled_from(["zero_torque", "motor_damping"]),
       st.lists(st.tuples(samples, refs, steps), min_size=1, max_size=6))
def test_controller_output_finite_saturated_slew_limited(law, g, lim, mode, seq):
    """Whatever the law makes of hostile readings, references and stamps, the command obeys the filter."""
    c = JointController(law, MODEL, g, lim, mode, period=PERIOD)
    contract = SlewContract(lim)
    for (s, ref, _), t in zip(seq, stamps(d for _, _, d in seq)):
        had_fault = c.fault
        out = c.step(s, ref, t, PERIOD)
        contract.check(t, out)
        if bad(s):
            assert isinstance(c.fault, Fault) and c.fault.reason
        if had_fault is not None:
            assert c.fault == had_fault


@PROPERTY
@given(law_names, samples, refs, st.sampled_from([0, 1, 2, 3, 4]), st.sampled_from([NAN, INF, -INF]))
def test_non_finite_reference_trips(law, s, ref, i, value):
    """Every law, even zero, refuses a non-finite reference: fault, finite command. A reading
    beyond a limit is refused first (the law and its reference are not looked at then)."""
    ref = Reference(*(ref[:i] + (value,) + ref[i + 1:]))
    c = JointController(law, MODEL, Gains(link_damping=5.0, motor_stiffness=10.0), Limits(), "zero_torque")
    out = c.step(s, ref, 0.0, 1e-3)
    assert math.isfinite(out) and abs(out) <= Limits().torque
    assert isinstance(c.fault, Fault)
    if c.safety.check(s) is None:
        assert c.fault == Fault(FaultCode.NON_FINITE_REFERENCE, "non-finite reference")


# ---- unit tests ------------------------------------------------------------------------------

LIM = Limits(torque=4.0, torque_rate=100.0, deflection=0.1, position_lower=-1.0, position_upper=1.0,
             link_speed=5.0, motor_speed=6.0, safe_damping=3.0, driver_torque=10.0)
OK = JointSample(0.1, 0.5, 0.12, 0.6)


@pytest.mark.parametrize("reading, code", [
    (JointSample(0.0, 0.0, 0.11, 0.0), FaultCode.DEFLECTION),
    (JointSample(0.0, 0.0, -0.11, 0.0), FaultCode.DEFLECTION),
    (JointSample(1.01, 0.0, 1.01, 0.0), FaultCode.POSITION),
    (JointSample(-1.01, 0.0, -1.01, 0.0), FaultCode.POSITION),
    (JointSample(0.0, 5.1, 0.0, 0.0), FaultCode.LINK_SPEED),
    (JointSample(0.0, -5.1, 0.0, 0.0), FaultCode.LINK_SPEED),
    (JointSample(0.0, 0.0, 0.0, 6.1), FaultCode.MOTOR_SPEED),
    (JointSample(0.0, 0.0, 0.0, -6.1), FaultCode.MOTOR_SPEED),
    (JointSample(NAN, 0.0, 0.0, 0.0), FaultCode.NON_FINITE_READING),
])
def test_each_limit_trips_naming_it(reading, code):
    f = SafetyFilter(LIM, period=0.01)
    assert f.filter(OK, 1.0, 0.0) == 1.0 and f.fault is None
    f.filter(reading, 1.0, 0.01)
    assert f.fault.code is code
    assert f.reset() is not None and f.reset().code is code  # refused while the reading is bad
    f.filter(OK, 1.0, 0.02)
    assert f.fault is not None and f.fault.code is code  # still latched
    assert f.reset() is None and f.fault is None


def test_fault_text_stays_short_for_huge_readings():
    """A 1e308 reading gives a reason of a few dozen characters (it printed 330 digits)."""
    f = SafetyFilter(LIM)
    fault = f.check(JointSample(0.0, 0.0, 1e308, 0.0))
    assert fault.code is FaultCode.DEFLECTION and len(fault.reason) < 60 and "1e+308" in fault.reason


def test_reset_refused_after_non_finite_last_reading():
    """The last reading, not the last finite one, decides whether reset may clear the fault."""
    f = SafetyFilter(LIM)
    f.filter(OK, 0.0, 0.0)
    f.filter(JointSample(0.0, NAN, 0.0, 0.0), 0.0, 0.001)
    assert f.reset().code is FaultCode.NON_FINITE_READING and f.fault


def test_zero_torque_safe_mode_ramps_to_zero():
    f = SafetyFilter(LIM, "zero_torque", period=0.01)
    for k in range(5):
        f.filter(OK, 3.0, 0.01 * k)  # 1 N m per tick up to 3 N m
    assert f.last_torque == 3.0
    f.trip(Fault(FaultCode.STOP_REQUESTED, "stop"))
    # slew 100 N m/s * 0.01 s = 1 N m per tick, towards zero
    assert [f.filter(OK, 3.0, 0.05 + 0.01 * k) for k in range(4)] == pytest.approx([2.0, 1.0, 0.0, 0.0], abs=1e-12)


def moving_motor(speed, t0=0.0, dt=0.005, n=8, q=0.0):
    """Readings of a motor turning at a constant ``speed`` (rad/s): position integrates the speed."""
    return [(JointSample(q + speed * k * dt, speed, q + speed * k * dt, speed), t0 + k * dt) for k in range(n)]


def test_motor_damping_safe_mode_brakes_a_trusted_speed():
    """Target -safe_damping * theta' (by hand: -3 * 0.6 = -1.8 N m), saturated, slew limited."""
    f = SafetyFilter(LIM, "motor_damping", period=0.005, accel_bound=100.0)
    f.trip(Fault(FaultCode.STOP_REQUESTED, "stop"))
    out = [f.filter(s, 0.0, t) for s, t in moving_motor(0.6)]
    # the first reading has no predecessor to check it against: zero target, then 0.5 N m per tick
    assert out[:6] == pytest.approx([0.0, -0.5, -1.0, -1.5, -1.8, -1.8], abs=1e-12)
    fast = [f.filter(s, 0.0, t) for s, t in moving_motor(5.0, t0=0.04, q=0.021)]  # -15 N m, saturated at -4
    # the speed step 0.6 -> 5 rad/s is implausible for |theta''| <= 100 rad/s^2 over 5 ms: zero target first
    assert fast == pytest.approx([-1.3, -1.8, -2.3, -2.8, -3.3, -3.8, -4.0, -4.0], abs=1e-12)


def test_motor_damping_never_trusts_the_faulting_reading():
    """A bogus motor speed of +12 rad/s (limit 6) held for 100 ms on a resting joint: zero torque.
    (Before: -safe_damping * 12 = -36 N m target, -4 N m saturated, driving the link.)"""
    f = SafetyFilter(LIM, "motor_damping", period=0.001, accel_bound=1000.0)
    rest = JointSample(0.0, 0.0, 0.0, 0.0)
    for k in range(5):
        f.filter(rest, 0.0, 0.001 * k)
    bogus = JointSample(0.0, 0.0, 0.0, 12.0)
    out = [f.filter(bogus, 0.0, 0.005 + 0.001 * k) for k in range(100)]
    assert f.fault.code is FaultCode.MOTOR_SPEED and out == [0.0] * 100


def test_motor_damping_refuses_a_speed_the_motor_position_contradicts():
    """A bogus 5 rad/s within the 6 rad/s limit while the motor position stands still: zero torque."""
    f = SafetyFilter(LIM, "motor_damping", period=0.001, accel_bound=1000.0)
    f.trip(Fault(FaultCode.STOP_REQUESTED, "stop"))
    still = JointSample(0.0, 0.0, 0.0, 5.0)
    out = [f.filter(still, 0.0, 0.001 * k) for k in range(50)]
    assert out == [0.0] * 50 and not f.trusted


def test_motor_damping_overflow_saturates():
    """-safe_damping * theta' of a huge trusted speed saturates at the torque limit."""
    f = SafetyFilter(Limits(torque=4.0, torque_rate=1e6, safe_damping=1e10), "motor_damping", 0.01, 1e6)
    f.trip(Fault(FaultCode.STOP_REQUESTED, "stop"))
    out = [f.filter(s, 0.0, t) for s, t in moving_motor(1e3, dt=0.01, n=3)]
    assert out[-1] == -4.0


def _pd_controller(**limits):
    """motor_pd with K = 10 N m/rad and no gravity: tau = 10 (q_d - theta) (Tomei's PD by hand)."""
    lim = Limits(**{"torque": 4.0, "torque_rate": 100.0, "safe_damping": 3.0, **limits})
    return JointController("motor_pd", NominalModel(), Gains(motor_stiffness=10.0), lim, "zero_torque", period=0.01)


def test_stop_trips_and_reset_restores_commanding():
    c = _pd_controller()
    s, ref = JointSample(0.0, 0.0, 0.0, 0.0), Reference(0.3)
    for i in range(4):
        c.step(s, ref, 0.01 * i, 0.01)
    c.stop()
    assert c.fault.code is FaultCode.STOP_REQUESTED
    assert [c.step(s, ref, 0.04 + 0.01 * i, 0.01) for i in range(4)] == pytest.approx([2.0, 1.0, 0.0, 0.0], abs=1e-12)
    assert c.reset() is None and c.fault is None
    assert [c.step(s, ref, 0.08 + 0.01 * i, 0.01) for i in range(4)] == pytest.approx([1.0, 2.0, 3.0, 3.0])


def test_ramp_down_reaches_zero_at_the_slew_limit():
    c = _pd_controller()
    s, ref = JointSample(0.0, 0.0, 0.0, 0.0), Reference(0.3)
    for i in range(5):
        c.step(s, ref, 0.01 * i, 0.01)
    assert [c.ramp_down(0.05 + 0.01 * i) for i in range(4)] == pytest.approx([2.0, 1.0, 0.0, 0.0], abs=1e-12)


def test_reset_refused_while_reading_violates_a_limit():
    c = _pd_controller(deflection=0.1)
    c.step(JointSample(0.0, 0.0, 0.2, 0.0), Reference(0.0), 0.0, 0.01)
    assert c.fault.code is FaultCode.DEFLECTION
    assert c.reset().code is FaultCode.DEFLECTION and c.fault
    c.step(JointSample(0.0, 0.0, 0.05, 0.0), Reference(0.0), 0.01, 0.01)
    assert c.reset() is None and c.fault is None


def test_reset_refused_before_any_reading():
    assert SafetyFilter(LIM).reset().code is FaultCode.NO_READING


def test_ramp_to_zero_longer_than_the_maximum_is_refused():
    with pytest.raises(ValueError, match="torque_rate"):
        Limits(torque=40.0, torque_rate=3.0)  # 13.3 s > MAX_RAMP_DOWN


# ---- watchdog (control/watchdog.py): silence on a clock that cannot jump ------------------------------

def test_watchdog_arms_on_the_first_joint_state_and_expires_after_the_timeout():
    w = Watchdog(0.05)
    assert w.expired(100.0) is None and not w.armed  # activation long ago, no joint state: no fault
    w.fresh(100.0)
    assert w.expired(100.05) is None  # exactly the timeout: not yet
    fault = w.expired(100.0501)
    assert fault.code is FaultCode.WATCHDOG and "no joint state" in fault.reason


def test_watchdog_names_a_stuck_stamp_and_rejected_messages():
    w = Watchdog(0.05)
    w.fresh(0.0)
    for _ in range(50):
        w.repeated()
    assert w.expired(0.06).code is FaultCode.STAMP_STUCK
    w.fresh(0.1)
    w.rejected(Rejection("stamp 2.000 s ahead of the clock"))
    fault = w.expired(0.2)
    assert fault.code is FaultCode.WATCHDOG and "ahead of the clock" in fault.reason


def test_clock_stall_detects_sim_time_standing_still():
    stall = ClockStall(2.0)
    assert stall.expired(5.0, 10.0) is None
    assert stall.expired(5.001, 11.0) is None  # sim time moves: fine
    assert stall.expired(5.001, 13.0) is None  # 2.0 s standing: not yet
    assert stall.expired(5.001, 13.01).code is FaultCode.CLOCK_STOPPED


# ---- joint-state decoding (joint_state_codec): malformed messages never reach the controller ---------

CODEC_JOINTS = [SimpleNamespace(link_state="knee", motor_state="knee_motor"),
                SimpleNamespace(link_state="hip", motor_state="hip_motor")]
POOL = ["knee", "knee_motor", "hip", "hip_motor", "aux"]


@st.composite
def messages(draw):
    """JointState fields: names from POOL (maybe missing or repeated), arrays of maybe wrong lengths."""
    if draw(st.booleans()):  # well formed, finite, but for at most one hostile value
        names = draw(st.permutations(POOL))
        n = len(names)
        fields = [draw(st.lists(st.floats(-0.5, 0.5), min_size=size, max_size=size))
                  for size in (n, n, draw(st.sampled_from([n, 0])))]
        if draw(st.booleans()):
            f = draw(st.sampled_from([f for f in fields if f]))
            f[draw(st.integers(0, n - 1))] = draw(anything)
        return (names, *fields)
    names = draw(st.lists(st.sampled_from(POOL), min_size=0, max_size=6))
    n = len(names)

    def array(allow_empty):
        size = draw(st.sampled_from([n, n, n, max(n - 1, 0), n + 1] + ([0] if allow_empty else [])))
        return draw(st.lists(mostly_finite, min_size=size, max_size=size))
    return names, array(False), array(False), array(True)


def decoded_by_hand(names, pos, vel, eff, from_effort):
    """The interface notes' rule: equal lengths (effort may be empty unless used), unique names,
    every configured entry present and finite; samples in configured order. None: reject."""
    n = len(names)
    if len(pos) != n or len(vel) != n or len(eff) not in (0, n) or len(set(names)) != n:
        return None
    if from_effort and not eff:
        return None
    out = []
    for j in CODEC_JOINTS:
        if j.link_state not in names or j.motor_state not in names:
            return None
        i, m = names.index(j.link_state), names.index(j.motor_state)
        values = [pos[i], vel[i], pos[m], vel[m]] + ([eff[i]] if from_effort else [])
        if not all(math.isfinite(v) for v in values):
            return None
        out.append(JointSample(*values[:4], values[4] if from_effort else None))
    return out


@PROPERTY
@given(messages(), st.booleans())
def test_decoder_rejects_malformed_and_non_finite_messages(msg, from_effort):
    """Mismatched lengths, missing or repeated names, non-finite values: a reason, never samples;
    accepted samples equal the fields picked by name, and give a finite command."""
    dec = StateDecoder(CODEC_JOINTS, from_effort)
    got = dec.decode(*msg)
    expected = decoded_by_hand(*msg, from_effort)
    if expected is None:
        assert isinstance(got, Rejection) and got.reason and dec.last_rejection == got and dec.rejected == 1
        return
    assert [tuple(s[:4]) for s in got] == [tuple(s[:4]) for s in expected]
    assert [s.tau_s for s in got] == [s.tau_s for s in expected]
    for s in got:
        c = JointController("motor_pd", MODEL, Gains(motor_stiffness=50.0), Limits())
        assert math.isfinite(c.step(s, Reference(0.0), 0.0, 1e-3))
