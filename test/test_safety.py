"""Safety filter and JointController: property tests over hostile inputs, plus unit tests.

The reference for every check is the safety contract of the design notes (section 5),
written out here by hand: saturation |tau| <= tau_max, slew |tau - tau_prev| <= rate * dt,
non-finite input => fault, latching fault cleared only by reset() within limits; for
joint-state decoding, the interface rule of joint_state_codec's notes, written out by hand.
Float comparisons allow one unit in the last place (math.ulp), the rounding of one addition.
"""
import math
from types import SimpleNamespace

import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from compliant_damping.controller import JointController
from compliant_damping.joint_state_codec import StateDecoder
from compliant_damping.laws import LAW_NAMES, Gains, NominalModel
from compliant_damping.safety import Limits, SafetyFilter
from compliant_damping.sample import JointSample

PROPERTY = settings(max_examples=2000, deadline=None)
NAN, INF = math.nan, math.inf

# Readings and torques: ordinary numbers mixed with NaN, +/-inf, huge and denormal values.
SPECIAL = st.sampled_from([NAN, INF, -INF, 1e300, -1e300, 5e-324, -5e-324, 0.0])
anything = st.one_of(SPECIAL, st.floats(-2.0, 2.0), st.floats(allow_nan=True, allow_infinity=True))
mostly_finite = st.one_of(st.floats(-0.5, 0.5), st.floats(-0.5, 0.5), anything)
# Control periods: 0, denormal, tiny, ordinary, huge, NaN, inf and negative.
dts = st.one_of(st.sampled_from([0.0, 5e-324, 1e-12, 1e-3, 1e300, NAN, INF, -1e-3]), st.floats(0.0, 0.1))


@st.composite
def limits(draw):
    """Valid Limits as config.build accepts them (positive limits finite, speeds may be inf)."""
    lower = draw(st.one_of(st.just(-INF), st.floats(-2.0, 0.0)))
    upper = draw(st.one_of(st.just(INF), st.floats(0.001, 2.0)))
    speed = st.one_of(st.just(INF), st.floats(0.01, 50.0))
    torque = draw(st.floats(1e-3, 1e3))
    return Limits(torque=torque, torque_rate=draw(st.floats(1e-3, 1e6)),
                  deflection=draw(st.floats(1e-3, 1.0)), position_lower=lower, position_upper=upper,
                  link_speed=draw(speed), motor_speed=draw(speed),
                  safe_damping=draw(st.one_of(st.just(0.0), st.floats(0.0, 1e12))),
                  driver_torque=draw(st.one_of(st.just(INF), st.floats(torque, 2e3))))


samples = st.builds(JointSample, mostly_finite, mostly_finite, mostly_finite, mostly_finite, anything)
ticks = st.lists(st.tuples(samples, anything, dts), min_size=1, max_size=6)


def allowed_step(lim: Limits, dt: float) -> float:
    """Slew budget of one tick (N m): a non-finite or negative dt allows no change."""
    return lim.torque_rate * dt if math.isfinite(dt) and dt > 0.0 else 0.0


def check_command(lim: Limits, prev: float, tau: float, dt: float) -> None:
    """The filter's output contract for one tick (design notes, section 5)."""
    assert math.isfinite(tau)
    assert abs(tau) <= lim.torque
    # Slew is measured from the previous command clipped to the (possibly lowered) limit.
    start = min(max(prev, -lim.torque), lim.torque)
    assert abs(tau - start) <= allowed_step(lim, dt) + math.ulp(max(abs(tau), abs(start)))


def bad(s: JointSample) -> bool:
    return not all(math.isfinite(v) for v in s[:4])


@PROPERTY
@given(limits(), st.sampled_from(["zero_torque", "motor_damping"]), ticks)
def test_filter_output_finite_saturated_slew_limited(lim, mode, seq):
    f = SafetyFilter(lim, mode)
    for s, tau, dt in seq:
        prev, had_fault = f.last_torque, f.fault
        out = f.filter(s, tau, dt)
        check_command(lim, prev, out, dt)
        assert out == f.last_torque
        if bad(s) or not math.isfinite(tau):
            assert isinstance(f.fault, str) and f.fault
        if had_fault is not None:
            assert f.fault == had_fault  # latched: the first reason stays


@PROPERTY
@given(limits(), st.floats(1e-3, 1e3), st.lists(st.tuples(anything, dts), min_size=1, max_size=8))
def test_lowered_torque_limit_wins_over_slew(lim, start, seq):
    """After set_limits lowers the torque limit, limit() clips again: |tau| <= the new limit at once."""
    f = SafetyFilter(Limits(torque=1e3, torque_rate=1e12), "zero_torque")
    f.limit(start, 1.0)
    assert f.last_torque == start
    f.limits = lim
    for tau, dt in seq:
        prev = f.last_torque
        out = f.limit(tau, dt)
        check_command(lim, prev, out, dt)


def test_lowered_torque_limit_applies_at_once():
    f = SafetyFilter(Limits(torque=10.0, torque_rate=100.0))
    for _ in range(10):
        f.limit(8.0, 0.01)
    assert f.last_torque == pytest.approx(8.0)
    f.limits = Limits(torque=2.0, torque_rate=100.0)
    assert f.limit(8.0, 0.0) == 2.0  # no slew budget (dt = 0), yet the new limit holds
    assert f.limit(-8.0, 0.01) == pytest.approx(1.0)  # then 1 N m per tick again


@PROPERTY
@given(limits(), st.sampled_from(["zero_torque", "motor_damping"]), ticks, samples)
def test_fault_latches_until_reset_within_limits(lim, mode, seq, last):
    f = SafetyFilter(lim, mode)
    for s, tau, dt in seq:
        f.filter(s, tau, dt)
    f.trip("test stop")
    reason = f.fault
    f.filter(last, 0.0, 1e-3)  # a reading in fault does not clear it, whatever it is
    assert f.fault == reason
    refused = f.reset()
    if f.violation(last) is not None:
        # the last reading violates a limit (or is non-finite): reset refuses with a reason
        assert isinstance(refused, str) and refused and f.fault == reason
    else:
        assert refused is None and f.fault is None


law_names = st.sampled_from(LAW_NAMES)
refs = st.tuples(mostly_finite, mostly_finite, mostly_finite)
gains = st.builds(Gains, motor_stiffness=st.floats(0.0, 1e3), motor_damping=st.floats(0.0, 50.0),
                  link_damping=st.floats(0.1, 50.0), link_stiffness=st.floats(0.0, 500.0),
                  decoupling_stiffness=st.floats(1.0, 1e4),
                  virtual_mass=st.one_of(st.just(0.0), st.floats(1e-3, 1.0)),
                  motor_inertia_target=st.one_of(st.just(0.0), st.floats(1e-3, 1.0)))
MODEL = NominalModel(link_inertia=0.25, motor_inertia=0.15, spring_stiffness=300.0, gravity_torque=2.0)


@PROPERTY
@given(law_names, gains, limits(), st.sampled_from(["zero_torque", "motor_damping"]),
       st.lists(st.tuples(samples, refs, dts), min_size=1, max_size=6))
def test_controller_output_finite_saturated_slew_limited(law, g, lim, mode, seq):
    """Whatever the law makes of hostile readings and references, the command obeys the filter."""
    c = JointController(law, MODEL, g, lim, mode)
    t = 0.0
    for s, ref, dt in seq:
        prev, had_fault = c.safety.last_torque, c.fault
        t += 1e-3
        out = c.step(s, ref, t, dt)
        check_command(lim, prev, out, dt)
        if bad(s):
            assert isinstance(c.fault, str) and c.fault
        if had_fault is not None:
            assert c.fault == had_fault


@PROPERTY
@given(law_names, samples, refs, st.sampled_from([0, 1, 2]), st.sampled_from([NAN, INF, -INF]))
def test_non_finite_reference_trips(law, s, ref, i, value):
    """Every law, even zero, refuses a non-finite reference: fault, finite command."""
    ref = ref[:i] + (value,) + ref[i + 1:]
    c = JointController(law, MODEL, Gains(link_damping=5.0, motor_stiffness=10.0), Limits(), "zero_torque")
    out = c.step(s, ref, 0.0, 1e-3)
    assert math.isfinite(out) and abs(out) <= Limits().torque
    assert isinstance(c.fault, str) and c.fault
    if not bad(s):
        assert c.fault == "non-finite reference"


# ---- unit tests ------------------------------------------------------------------------------

LIM = Limits(torque=4.0, torque_rate=100.0, deflection=0.1, position_lower=-1.0, position_upper=1.0,
             link_speed=5.0, motor_speed=6.0, safe_damping=3.0, driver_torque=10.0)
OK = JointSample(0.1, 0.5, 0.12, 0.6)


@pytest.mark.parametrize("reading, word", [
    (JointSample(0.0, 0.0, 0.11, 0.0), "deflection"),
    (JointSample(0.0, 0.0, -0.11, 0.0), "deflection"),
    (JointSample(1.01, 0.0, 1.01, 0.0), "link position"),
    (JointSample(-1.01, 0.0, -1.01, 0.0), "link position"),
    (JointSample(0.0, 5.1, 0.0, 0.0), "link speed"),
    (JointSample(0.0, -5.1, 0.0, 0.0), "link speed"),
    (JointSample(0.0, 0.0, 0.0, 6.1), "motor speed"),
    (JointSample(0.0, 0.0, 0.0, -6.1), "motor speed"),
    (JointSample(NAN, 0.0, 0.0, 0.0), "non-finite"),
])
def test_each_limit_trips_naming_it(reading, word):
    f = SafetyFilter(LIM)
    assert f.filter(OK, 1.0, 0.01) == 1.0 and f.fault is None
    f.filter(reading, 1.0, 0.01)
    assert word in f.fault
    assert f.reset() is not None and word in f.reset()  # refused while the reading is bad
    f.filter(OK, 1.0, 0.01)
    assert f.fault is not None and word in f.fault  # still latched
    assert f.reset() is None and f.fault is None


def test_reset_refused_after_non_finite_last_reading():
    """The last reading, not the last finite one, decides whether reset may clear the fault."""
    f = SafetyFilter(LIM)
    f.filter(OK, 0.0, 0.01)
    f.filter(JointSample(0.0, NAN, 0.0, 0.0), 0.0, 0.01)
    assert f.reset() == "non-finite joint state" and f.fault


def test_zero_torque_safe_mode_ramps_to_zero():
    f = SafetyFilter(LIM, "zero_torque")
    for _ in range(5):
        f.filter(OK, 3.0, 0.01)  # 1 N m per tick up to 3 N m
    assert f.last_torque == 3.0
    f.trip("stop")
    # slew 100 N m/s * 0.01 s = 1 N m per tick, towards zero
    assert [f.filter(OK, 3.0, 0.01) for _ in range(4)] == pytest.approx([2.0, 1.0, 0.0, 0.0], abs=1e-12)


def test_motor_damping_safe_mode():
    """Target -safe_damping * theta' (by hand: -3 * 0.6 = -1.8 N m), saturated, slew limited."""
    f = SafetyFilter(LIM, "motor_damping")
    f.trip("stop")
    out = [f.filter(OK, 0.0, 0.005) for _ in range(5)]  # 0.5 N m per tick
    assert out == pytest.approx([-0.5, -1.0, -1.5, -1.8, -1.8], abs=1e-12)
    fast = JointSample(0.0, 0.0, 0.0, 5.0)  # -15 N m, saturated at -4 N m
    assert [f.filter(fast, 0.0, 0.01) for _ in range(4)] == pytest.approx([-2.8, -3.8, -4.0, -4.0], abs=1e-12)
    # a reading without a finite motor speed gives no damping target: towards zero
    assert f.filter(JointSample(0.0, 0.0, 0.0, NAN), 0.0, 0.01) == pytest.approx(-3.0, abs=1e-12)


def test_motor_damping_overflow_saturates():
    """-safe_damping * theta' overflowing to -inf is a very large target: it saturates."""
    f = SafetyFilter(Limits(torque=4.0, torque_rate=1e6, safe_damping=1e10), "motor_damping")
    f.trip("stop")
    assert f.filter(JointSample(0.0, 0.0, 0.0, 1e300), 0.0, 1.0) == -4.0


def _pd_controller(**limits):
    """motor_pd with K = 10 N m/rad and no gravity: tau = 10 (q_d - theta) (Tomei's PD by hand)."""
    lim = Limits(**{"torque": 4.0, "torque_rate": 100.0, "safe_damping": 3.0, **limits})
    return JointController("motor_pd", NominalModel(), Gains(motor_stiffness=10.0), lim, "zero_torque")


def test_watchdog_trips_after_timeout_and_ramps_to_zero():
    c = _pd_controller()
    c.arm(0.0)
    s, ref = JointSample(0.0, 0.0, 0.0, 0.0), (0.3, 0.0, 0.0)  # law asks 3 N m
    out = [c.step(s, ref, 0.01 * i, 0.01) for i in range(5)]
    assert out == pytest.approx([1.0, 2.0, 3.0, 3.0, 3.0])
    last = 0.04
    assert c.watchdog(last + 0.05, 0.05, 0.01) is None  # exactly the timeout: not yet
    assert c.fault is None
    ramp = [c.watchdog(last + 0.06 + 0.01 * i, 0.05, 0.01) for i in range(5)]
    assert "watchdog" in c.fault
    assert ramp == pytest.approx([2.0, 1.0, 0.0, 0.0, 0.0], abs=1e-12)


def test_stop_trips_and_reset_restores_commanding():
    c = _pd_controller()
    s, ref = JointSample(0.0, 0.0, 0.0, 0.0), (0.3, 0.0, 0.0)
    for i in range(4):
        c.step(s, ref, 0.01 * i, 0.01)
    c.stop()
    assert c.fault == "stop requested"
    assert [c.step(s, ref, 0.05 + 0.01 * i, 0.01) for i in range(4)] == pytest.approx([2.0, 1.0, 0.0, 0.0], abs=1e-12)
    assert c.reset() is None and c.fault is None
    assert [c.step(s, ref, 0.1 + 0.01 * i, 0.01) for i in range(4)] == pytest.approx([1.0, 2.0, 3.0, 3.0])


def test_reset_refused_while_reading_violates_a_limit():
    c = _pd_controller(deflection=0.1)
    c.step(JointSample(0.0, 0.0, 0.2, 0.0), (0.0, 0.0, 0.0), 0.0, 0.01)
    assert "deflection" in c.fault
    assert "deflection" in c.reset() and c.fault
    c.step(JointSample(0.0, 0.0, 0.05, 0.0), (0.0, 0.0, 0.0), 0.01, 0.01)
    assert c.reset() is None and c.fault is None


def test_reset_refused_before_any_reading():
    assert SafetyFilter(LIM).reset() == "no joint state received yet"


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
        out.append(JointSample(*values[:4], values[4] if from_effort else NAN))
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
        assert isinstance(got, str) and got and dec.last_reason == got and dec.rejected == 1
        return
    assert [tuple(s[:4]) for s in got] == [tuple(s[:4]) for s in expected]
    assert all((math.isnan(a.tau_s) and math.isnan(b.tau_s)) or a.tau_s == b.tau_s for a, b in zip(got, expected))
    for s in got:
        c = JointController("motor_pd", MODEL, Gains(motor_stiffness=50.0), Limits())
        assert math.isfinite(c.step(s, (0.0, 0.0, 0.0), 0.0, 1e-3))
