"""Message pieces the nodes share: stamps and durations in whole nanoseconds, and a motion as the
trajectory message the controller follows (``link_trajectory``)."""
from __future__ import annotations

from builtin_interfaces.msg import Duration, Time
from trajectory_msgs.msg import JointTrajectory, JointTrajectoryPoint

__all__ = ["nanoseconds", "time_msg", "duration_msg", "trajectory_msg"]

_NS = 1_000_000_000


def nanoseconds(stamp) -> int:
    """A builtin_interfaces Time or Duration in whole ns."""
    return stamp.sec * _NS + stamp.nanosec


def time_msg(ns: int) -> Time:
    """The Time of ``ns`` (whole ns)."""
    return Time(sec=ns // _NS, nanosec=ns % _NS)


def duration_msg(ns: int) -> Duration:
    """The Duration of ``ns`` (whole ns, non-negative)."""
    return Duration(sec=ns // _NS, nanosec=ns % _NS)


def trajectory_msg(joint: str, spline) -> JointTrajectory:
    """One joint's motion (references.WaypointSpline, knots on whole ns) as a trajectory message:
    stamped with its first knot, a point per knot with the position and the time from the first."""
    knots = [round(t * 1e9) for t in spline.times]
    points = [JointTrajectoryPoint(positions=[float(p)], time_from_start=duration_msg(k - knots[0]))
              for k, p in zip(knots, spline.positions)]
    msg = JointTrajectory(joint_names=[joint], points=points)
    msg.header.stamp = time_msg(knots[0])
    return msg
