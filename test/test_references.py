"""Reference trajectories: their stated derivatives against numerical differentiation of their own
positions, their continuity, their end points, and which laws refuse them."""
import numpy as np
import pytest
from numpy.polynomial import Polynomial

from compliant_damping.control.laws import LAW_NAMES, check_reference
from compliant_damping.control.references import (Constant, Cruise, MinimumJerk, RestToRest, Sinusoid, Step,
                                                  WaypointSpline, rest_profile)

SMOOTH = [Cruise(0.0, 0.85, 1.0, 0.1, 0.1), Cruise(0.5, -0.3, 2.0, 0.2), RestToRest(0.1, 0.6, 0.4, 0.05),
          Sinusoid(0.2, 0.3, 1.0), WaypointSpline((0.05, 0.4, 0.9, 1.3), (0.0, 0.3, -0.1, 0.2))]


@pytest.mark.parametrize("ref", SMOOTH + [MinimumJerk(0.1, 0.6, 0.4, 0.05)], ids=lambda r: type(r).__name__)
def test_derivatives_match_numerical_gradient(ref):
    """Reference: numpy.gradient (second-order central differences) of each sampled derivative,
    on a 10 us grid; agreement to 1e-3 of the peak of the next derivative (the grid's error is
    well below that away from the kinks of the highest derivative); up to the reference's
    smoothness (a derivative that jumps has no gradient there)."""
    t = np.arange(0.0, 1.5, 1e-5)
    x = np.array([ref.sample(ti) for ti in t])
    for col in range(1, ref.smoothness + 1):
        numeric = np.gradient(x[:, col - 1], t)
        assert np.max(np.abs(numeric - x[:, col])) < 1e-3 * max(1.0, np.max(np.abs(x[:, col])))


@pytest.mark.parametrize("ref", SMOOTH, ids=lambda r: type(r).__name__)
def test_smooth_references_are_continuous_to_the_fourth_derivative(ref):
    """No jump in any derivative from one 10 us sample to the next beyond what its next derivative
    allows (|jump| <= 1e-5 s * peak of the next derivative * 2, with the fifth bounded by a sixth of
    the fourth's peak per 1e-3 s: a jump would be orders of magnitude larger)."""
    t = np.arange(0.0, 1.5, 1e-5)
    x = np.array([ref.sample(ti) for ti in t])
    for col in range(4):
        assert np.max(np.abs(np.diff(x[:, col]))) <= 2e-5 * np.max(np.abs(x[:, col + 1])) + 1e-12
    fourth = np.abs(np.diff(x[:, 4]))
    assert np.max(fourth) < 2e-3 * max(1.0, np.max(np.abs(x[:, 4])))


def test_minimum_jerk_jumps_in_jerk():
    ref = MinimumJerk(0.0, 1.0, 1.0)
    assert ref.sample(-1e-9).dddq == 0.0 and ref.sample(1e-9).dddq == pytest.approx(60.0, rel=1e-6)


def test_rest_profile_equals_its_polynomial():
    """Reference: numpy.polynomial of 126u^5 - 420u^6 + 540u^7 - 315u^8 + 70u^9, its derivatives and
    integral; the ten end conditions s(0) = 0, s(1) = 1, s^(k)(0) = s^(k)(1) = 0 for k = 1..4."""
    p = Polynomial([0, 0, 0, 0, 0, 126, -420, 540, -315, 70])
    expected = [p] + [p.deriv(k) for k in range(1, 5)] + [p.integ()]
    for u in np.linspace(0.0, 1.0, 23):
        np.testing.assert_allclose(rest_profile(u), [f(u) for f in expected], rtol=1e-12, atol=1e-10)
    assert p(1.0) == pytest.approx(1.0)
    for k in range(1, 5):
        assert p.deriv(k)(0.0) == 0.0 and p.deriv(k)(1.0) == pytest.approx(0.0, abs=1e-9)


def test_cruise_speed_and_end():
    ref = Cruise(0.0, 0.85, 1.0, 0.1, 0.1)
    assert ref.sample(0.5) == pytest.approx((0.35, 1.0, 0.0, 0.0, 0.0))  # 0.05 rad blend + 0.3 s at 1 rad/s
    assert ref.sample(10.0) == (0.85, 0.0, 0.0, 0.0, 0.0)
    assert ref.sample(0.0) == (0.0, 0.0, 0.0, 0.0, 0.0)
    with pytest.raises(ValueError, match="speed"):
        Cruise(0.0, 0.05, 1.0, 0.1)  # too short for two blends


def test_spline_passes_its_waypoints_and_rests_outside():
    ref = WaypointSpline((0.05, 0.4, 0.9, 1.3), (0.0, 0.3, -0.1, 0.2))
    assert [ref.sample(t).q for t in (0.4, 0.9)] == pytest.approx([0.3, -0.1], abs=1e-12)
    assert ref.sample(0.0) == (0.0, 0.0, 0.0, 0.0, 0.0) and ref.sample(2.0) == (0.2, 0.0, 0.0, 0.0, 0.0)
    with pytest.raises(ValueError, match="times"):
        WaypointSpline((0.0, 0.5, 0.5), (0.0, 0.1, 0.2))


def test_laws_refuse_references_not_smooth_enough():
    """Set points suit every law; the tracking laws need four continuous derivatives, motor_pd one."""
    for name in LAW_NAMES:
        for ref in [Constant(0.1), Step(0.0, 0.1, 0.2)] + SMOOTH:
            check_reference(name, ref)
    check_reference("motor_pd", MinimumJerk(0.0, 0.5, 1.0))
    for name in ("link_damping", "decoupled_damper", "decoupled_impedance"):
        with pytest.raises(ValueError, match="MinimumJerk is continuous only up to derivative 2"):
            check_reference(name, MinimumJerk(0.0, 0.5, 1.0))
