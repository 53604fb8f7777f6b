"""Reference trajectories: their stated derivatives against numpy.gradient of their positions, and
their documented end points."""
import numpy as np
import pytest

from compliant_damping.control.references import Cruise, SmoothStep


@pytest.mark.parametrize("ref", [Cruise(0.0, 0.85, 1.0, 0.1, 0.1), Cruise(0.5, -0.3, 2.0, 0.2),
                                 SmoothStep(0.1, 0.6, 0.4, 0.05)])
def test_derivatives_match_numerical_gradient(ref):
    """Reference: numpy.gradient (second-order central differences) of the sampled position and
    speed, 10 us grid; agreement to 1e-3 of the peak speed/acceleration (the grid's error is
    well below that away from the kinks of the acceleration)."""
    t = np.arange(0.0, 1.5, 1e-5)
    x = np.array([ref.sample(ti) for ti in t])
    for col in (1, 2):
        numeric = np.gradient(x[:, col - 1], t)
        assert np.max(np.abs(numeric - x[:, col])) < 1e-3 * max(1.0, np.max(np.abs(x[:, col])))
    assert np.max(np.abs(np.diff(x[:, 1]))) < 1e-3  # speed is continuous (no step in the feed-forward)


def test_cruise_speed_and_end():
    ref = Cruise(0.0, 0.85, 1.0, 0.1, 0.1)
    assert ref.sample(0.5) == pytest.approx((0.35, 1.0, 0.0))  # cruising: 0.05 rad blend + 0.3 s at 1 rad/s
    assert ref.sample(10.0) == (0.85, 0.0, 0.0)
    assert ref.sample(0.0) == (0.0, 0.0, 0.0)
    with pytest.raises(ValueError, match="speed"):
        Cruise(0.0, 0.05, 1.0, 0.1)  # too short for two blends
