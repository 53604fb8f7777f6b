"""trajectory_msgs/JointTrajectory contents as plain sequences: a motion through waypoints.

A trajectory message moves some joints along the rest-to-rest spline through its points'
positions (references.WaypointSpline: ninth degree, continuous up to the fourth derivative,
at rest at the first and the last point), which is what the tracking laws need. No ROS here:
the controller node passes the joint names, the points' times (s, node time: ``header.stamp``
plus each ``time_from_start``) and positions, and the names of the point fields that carry
values besides the positions.
"""
from __future__ import annotations

import math

from compliant_damping.control.references import WaypointSpline
from compliant_damping.io.joint_state_codec import Rejection

__all__ = ["beyond_position_limits", "decode_trajectory"]


def decode_trajectory(joint_names, limits, names, times, positions, filled=()) -> dict | Rejection:
    """The motion of one trajectory message: {joint index: WaypointSpline}, or its :class:`Rejection`.

    Parameters
    ----------
    joint_names : sequence of str
        The configured joints, in joint order.
    limits : sequence of safety.Limits
        Their limits: the spline's speed must stay within the link speed limit over all time
        (exact extremes, WaypointSpline.peak_speed). Positions beyond the position limits are
        clipped at each tick by the controller, derivatives kept, as for every reference
        (controller.JointController.step); :func:`beyond_position_limits` says so beforehand.
    names : sequence of str
        The message's ``joint_names``.
    times : sequence of float
        Time of each point (s, node time), strictly increasing.
    positions : sequence of sequences of float
        Per point, a position (rad) per entry of ``names``.
    filled : sequence of str
        Point fields besides positions that carry values (velocities, accelerations, effort):
        refused, since the spline through the positions is what the joints follow.
    """
    if filled:
        return Rejection(f"points carry {', '.join(filled)}: the joints follow the rest-to-rest spline through "
                         "the positions alone; send the points with positions and time_from_start only")
    names = list(names)
    if len(set(names)) != len(names):
        return Rejection("repeated joint names")
    unknown = [n for n in names if n not in joint_names]
    if unknown or not names:
        return Rejection(f"no configured joint named {', '.join(map(repr, unknown))}" if unknown else "no joint names")
    if len(times) < 2:
        return Rejection(f"a trajectory needs at least two points (got {len(times)})")
    if any(len(row) != len(names) for row in positions):
        return Rejection(f"every point needs {len(names)} positions, one per joint name")
    if not all(math.isfinite(v) for row in positions for v in row):
        return Rejection("non-finite position")
    motion = {}
    for column, name in enumerate(names):
        j = list(joint_names).index(name)
        try:
            spline = WaypointSpline(tuple(times), tuple(row[column] for row in positions))
        except ValueError as err:
            return Rejection(f"time_from_start: {err}")
        lim = limits[j]
        speed = spline.peak_speed()
        if speed > lim.link_speed:
            return Rejection(f"{name}: the spline through the points reaches {speed:.4g} rad/s, beyond the "
                             f"{lim.link_speed} rad/s link speed limit")
        motion[j] = spline
    return motion


def beyond_position_limits(joint_names, limits, motion: dict) -> Rejection | None:
    """Why ``motion`` ({joint index: WaypointSpline}) will be clipped: the first joint whose spline
    leaves its position limits, with the range it reaches; None when it stays within them."""
    for j, spline in motion.items():
        low, high = spline.extremes(0)
        lim = limits[j]
        if low < lim.position_lower or high > lim.position_upper:
            return Rejection(f"{joint_names[j]}: the trajectory reaches [{low:+.4f}, {high:+.4f}] rad, clipped to "
                             f"the position limits [{lim.position_lower}, {lim.position_upper}] rad")
    return None
