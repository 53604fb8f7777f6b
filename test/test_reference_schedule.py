"""References as the controller node queues them: streamed samples and trajectories through waypoints.

Outside references: the two-point rest-to-rest spline is the ninth-degree profile
s(u) = 126u^5 - 420u^6 + 540u^7 - 315u^8 + 70u^9 (the unique polynomial of degree 9 with s(0) = 0,
s(1) = 1 and derivatives 1 to 4 zero at both ends; Biagiotti and Melchiorri, Trajectory Planning
for Automatic Machines and Robots, polynomial profiles), whose peak speed is s'(1/2) = 630/256 times
the mean speed, worked out by hand; numpy's polynomial roots for its peak acceleration.
"""
import dataclasses
import math

import numpy as np
import pytest
from numpy.polynomial import Polynomial

from compliant_damping.control.references import Cruise, Held, Sinusoid, WaypointSpline, spline_through
from compliant_damping.control.sample import Reference
from compliant_damping.io import config
from compliant_damping.io.reference_schedule import ReferenceSchedule
from compliant_damping.io.trajectory_codec import decode_trajectory

CTRL, SIM = config.load(config.bundled())
JOINT_LIMITS = CTRL.joints[0].limits  # bundled knee: position limits [-0.82, 0.82] rad, link speed 8 rad/s
PROFILE = Polynomial([0, 0, 0, 0, 0, 126, -420, 540, -315, 70])  # s(u), by hand (see above)


def test_reference_schedule_applies_each_reference_at_its_stamp():
    refs = ReferenceSchedule(["knee"], [JOINT_LIMITS])
    assert refs.add(0.2, ["knee"], [0.5], []) is None and refs.add(0.1, ["knee"], [0.3], [1.0]) is None
    assert refs.at(0.05) == [None] and len(refs) == 2
    assert refs.at(0.1) == [Reference(0.3, 1.0)]
    assert refs.at(0.3) == [Reference(0.5)] and len(refs) == 0
    assert "no configured joint" in refs.add(0.0, ["hip"], [0.1], []).reason
    assert "non-finite" in refs.add(0.0, ["knee"], [math.nan], []).reason
    refs.clear()
    assert refs.at(1.0) == [None]


def test_reference_schedule_clips_positions_and_refuses_speeds_beyond_the_limits():
    refs = ReferenceSchedule(["knee"], [JOINT_LIMITS])
    assert refs.add(0.0, ["knee"], [5.0], [0.0]) is None  # 5 rad: clipped to the upper limit
    assert refs.at(0.0) == [Reference(JOINT_LIMITS.position_upper)] and refs.clipped == 1
    assert "clipped" in refs.last_issue.reason
    refused = refs.add(0.0, ["knee"], [0.1], [1e6])
    assert "link speed limit" in refused.reason and refs.rejected == 1 and len(refs) == 0
    assert refs.at(0.1) == [Reference(JOINT_LIMITS.position_upper)]  # the refused one changed nothing
    assert refs.current == [Held(Reference(JOINT_LIMITS.position_upper))]


def test_two_point_spline_is_the_ninth_degree_profile_with_its_analytic_extremes():
    distance, duration = 0.5, 0.4
    spline = WaypointSpline((0.1, 0.1 + duration), (0.2, 0.2 + distance))
    u = np.linspace(0.0, 1.0, 41)
    np.testing.assert_allclose([spline.sample(0.1 + x * duration).q for x in u], 0.2 + distance * PROFILE(u),
                               rtol=0, atol=1e-12)
    assert spline.extremes(1) == pytest.approx((0.0, 630.0 / 256.0 * distance / duration), abs=1e-9)
    acceleration = PROFILE.deriv(2)
    peak = max(abs(acceleration(r.real)) for r in acceleration.deriv().roots() if abs(r.imag) < 1e-9 and 0 < r.real < 1)
    assert max(map(abs, spline.extremes(2))) == pytest.approx(peak * distance / duration**2, rel=1e-9)
    assert spline.extremes(0) == pytest.approx((0.2, 0.7), abs=1e-12)


def test_trajectory_speed_limit_is_the_exact_peak_of_the_spline():
    """0.5 rad in T s peaks at 630/256 * 0.5 / T rad/s: 8.20 over 0.15 s (refused, limit 8), 7.69 over 0.16 s."""
    fast = decode_trajectory(["knee"], [JOINT_LIMITS], ["knee"], [0.0, 0.15], [[0.0], [0.5]])
    assert "8.203 rad/s, beyond the 8.0 rad/s link speed limit" in fast.reason
    slow = decode_trajectory(["knee"], [JOINT_LIMITS], ["knee"], [0.0, 0.16], [[0.0], [0.5]])
    assert slow == {0: WaypointSpline((0.0, 0.16), (0.0, 0.5))}


def test_a_tightened_link_speed_limit_drops_the_queued_references_beyond_it():
    """A queued motion of 0.5 rad in 0.16 s peaks at 630/256 * 0.5 / 0.16 = 7.69 rad/s (by hand); a
    queued sample asks 6 rad/s. A limit of 7 rad/s drops the motion alone, 5 rad/s the sample too;
    what is already in effect stays (the safety filter checks the measured speed)."""
    refs = ReferenceSchedule(["knee"], [JOINT_LIMITS])
    assert refs.add(0.0, ["knee"], [0.1], [1.0]) is None  # in effect from the first tick
    assert refs.at(0.0) == [Reference(0.1, 1.0)]
    assert refs.add_trajectory(["knee"], [1.0, 1.16], [[0.0], [0.5]]) is None
    assert refs.add(2.0, ["knee"], [0.2], [6.0]) is None and refs.add(3.0, ["knee"], [0.3], [0.5]) is None
    peak = 630.0 / 256.0 * 0.5 / 0.16
    dropped = refs.set_limits([dataclasses.replace(JOINT_LIMITS, link_speed=7.0)])
    assert [d.reason for d in dropped] == [f"knee: a queued reference reaches {peak:.4g} rad/s, beyond the new "
                                           "7.0 rad/s link speed limit; dropped"]
    assert len(refs) == 2 and refs.rejected == 1 and refs.last_issue == dropped[0]
    assert refs.set_limits([dataclasses.replace(JOINT_LIMITS, link_speed=9.0)]) == []  # loosened: nothing
    dropped = refs.set_limits([dataclasses.replace(JOINT_LIMITS, link_speed=5.0)])
    assert len(dropped) == 1 and "reaches 6 rad/s" in dropped[0].reason and refs.rejected == 2
    assert refs.at(1.1) == [Reference(0.1, 1.0)]  # the motion is gone; the sample in effect stays
    assert refs.at(3.0) == [Reference(0.3, 0.5)] and len(refs) == 0
    assert "+5.5 rad/s beyond the 5.0 rad/s link speed limit" in refs.add(4.0, ["knee"], [0.0], [5.5]).reason


@pytest.mark.parametrize("args, reason", [
    ((["knee"], [0.0, 0.5], [[0.0], [0.3]], ("velocities",)), "points carry velocities"),
    ((["hip"], [0.0, 0.5], [[0.0], [0.3]]), "no configured joint named 'hip'"),
    ((["knee", "knee"], [0.0, 0.5], [[0.0, 0.0], [0.3, 0.3]]), "repeated joint names"),
    ((["knee"], [0.0], [[0.0]]), "at least two points"),
    ((["knee"], [0.0, 0.5], [[0.0], [0.3, 0.1]]), "every point needs 1 positions"),
    ((["knee"], [0.0, 0.5], [[0.0], [math.inf]]), "non-finite position"),
    ((["knee"], [0.5, 0.5], [[0.0], [0.3]]), "time_from_start: times: must increase strictly"),
])
def test_malformed_trajectories_are_refused_with_the_reason_and_change_nothing(args, reason):
    refs = ReferenceSchedule(["knee"], [JOINT_LIMITS])
    assert refs.add(0.0, ["knee"], [0.1], []) is None
    refused = refs.add_trajectory(*args)
    assert reason in refused.reason and refs.rejected == 1 and len(refs) == 1
    assert refs.at(1.0) == [Reference(0.1)]


def test_a_trajectory_takes_over_at_its_first_point_and_a_clipped_one_is_counted():
    """end_stop_impact's cruise aims 0.05 rad past the stop, beyond the 0.82 rad limit: queued, counted
    as clipped (the controllers clip the position at each tick); before its first point the held
    sample applies, from it on the spline with all four derivatives."""
    motion = spline_through(Cruise(0.0, 0.85, 1.0, 0.3, 0.1, brake=0.1), 0.005)
    refs = ReferenceSchedule(["knee"], [JOINT_LIMITS])
    assert refs.add(0.0, ["knee"], [0.0], []) is None
    assert refs.add_trajectory(["knee"], list(motion.times), [[p] for p in motion.positions]) is None
    assert refs.clipped == 1 and "+0.8500] rad, clipped to the position limits [-0.82, 0.82]" in refs.last_issue.reason
    assert refs.at(0.09) == [Reference(0.0)]
    for t in (0.1, 0.2, 0.55, 1.2):
        assert refs.at(t) == [motion.sample(t)]
    assert abs(refs.at(0.55)[0].ddq) < 1e-9 < 1.0 < abs(refs.at(0.25)[0].ddq)  # cruising, then speeding up


def test_spline_through_a_motion_keeps_its_knots_on_whole_nanoseconds_and_stays_close():
    """The Cruise is continuous to its fifth derivative; at 5 ms knots the spline through it stays
    within 1e-8 rad and 1e-5 rad/s (measured 2.9e-9 and 1.9e-6, dense grid)."""
    cruise = Cruise(0.0, 0.85, 1.0, 0.3, 0.1, brake=0.1)
    spline = spline_through(cruise, 0.005)
    assert len(spline.times) == 211 and spline.motion_span == pytest.approx(cruise.motion_span, abs=1e-9)
    assert all(round(t * 1e9) * 1e-9 == t for t in spline.times)
    grid = np.linspace(0.0, 1.5, 3001)
    assert max(abs(spline.sample(t).q - cruise.sample(t).q) for t in grid) < 1e-8
    assert max(abs(spline.sample(t).dq - cruise.sample(t).dq) for t in grid) < 1e-5
    with pytest.raises(ValueError, match="Sinusoid does not start and end at rest"):
        spline_through(Sinusoid(0.0, 0.3, 1.0), 0.005)
