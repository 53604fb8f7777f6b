"""Link references per joint, queued until their time: streamed samples (sensor_msgs/JointState
on ``link_reference``) and motions (trajectory_msgs/JointTrajectory on ``link_trajectory``). No ROS
here: the controller node passes the message fields."""
from __future__ import annotations

import bisect

from compliant_damping.control.references import Held
from compliant_damping.control.sample import Reference
from compliant_damping.io.joint_state_codec import Rejection, pick_values
from compliant_damping.io.trajectory_codec import beyond_position_limits, decode_trajectory

__all__ = ["ReferenceSchedule"]


class ReferenceSchedule:
    """Link references per joint that take effect at their stamp, checked against limits.

    Two kinds of entry: a streamed sample (:meth:`add`: position and speed, held until the next
    one) and a motion (:meth:`add_trajectory`: a spline through waypoints, sampled at every
    tick with all four derivatives). A sample stamped zero (or in the past) applies at the next
    tick; a future stamp applies from the first tick at or after it, so a scenario can be
    streamed ahead of time; a motion applies from its first point's time. Each message is
    checked against the joints' ``safety.Limits`` (``limits``): a sample's speed beyond the link
    speed limit refuses the whole message, its position outside the position limits is clipped
    to the nearer limit; a motion beyond the link speed limit is refused whole, and one leaving the
    position limits is counted as clipped (the controllers clip every reference position at each
    tick, derivatives kept). A link speed limit lowered later drops the queued messages beyond it
    (:meth:`set_limits`). All are counted (``rejected``, ``clipped``) with the last reason
    (``last_issue``).
    """

    def __init__(self, joint_names, limits, max_pending: int = 10000):
        self._names = list(joint_names)
        self.limits = list(limits)
        self._pending: list = []   # sorted (stamp s, sequence, {joint index: ref})
        self._seq = 0
        self._max = max_pending
        self.current = [None] * len(self._names)
        self.rejected = self.clipped = 0
        self.last_issue: Rejection | None = None

    def __len__(self) -> int:
        """Number of references waiting for their stamp."""
        return len(self._pending)

    def add(self, stamp: float, names, position, velocity) -> Rejection | None:
        """Queue one sample message (stamp s); returns its :class:`Rejection` when refused, else None."""
        refs = self._checked(names, position, velocity)
        return self._refuse(refs) if isinstance(refs, Rejection) else self._enqueue(stamp, refs)

    def add_trajectory(self, names, times, positions, filled=()) -> Rejection | None:
        """Queue one trajectory message (trajectory_codec.decode_trajectory: point times in s of node
        time, positions per point); returns its :class:`Rejection` when refused, else None."""
        motion = decode_trajectory(self._names, self.limits, names, times, positions, filled)
        if isinstance(motion, Rejection):
            return self._refuse(motion)
        clipped = beyond_position_limits(self._names, self.limits, motion)
        if clipped is not None:
            self.clipped += 1
            self.last_issue = clipped
        return self._enqueue(times[0], motion)

    def set_limits(self, limits) -> list:
        """Check against ``limits`` from now on; returns the :class:`Rejection` of each queued message dropped.

        When a link speed limit is lowered, each queued message is checked again: one that now asks
        a joint for more than its limit (a held sample's speed, a motion's exact peak speed) is
        dropped whole and counted as refused, as it would be on arrival. The references already in
        effect stay: the safety filter checks the measured link speed on every tick.
        """
        lowered = any(new.link_speed < old.link_speed for new, old in zip(limits, self.limits))
        self.limits = list(limits)
        if not lowered:
            return []
        kept, dropped = [], []
        for queued in self._pending:
            too_fast = next(((j, speed) for j, ref in queued[2].items()
                             if (speed := _peak_speed(ref)) > self.limits[j].link_speed), None)
            if too_fast is None:
                kept.append(queued)
                continue
            j, speed = too_fast
            dropped.append(self._refuse(Rejection(
                f"{self._names[j]}: a queued reference reaches {speed:.4g} rad/s, beyond the new "
                f"{self.limits[j].link_speed} rad/s link speed limit; dropped")))
        self._pending = kept
        return dropped

    def _refuse(self, rejection: Rejection) -> Rejection:
        self.rejected += 1
        self.last_issue = rejection
        return rejection

    def _enqueue(self, stamp: float, entry: dict) -> None:
        self._seq += 1
        bisect.insort(self._pending, (stamp, self._seq, entry), key=lambda e: (e[0], e[1]))
        del self._pending[:-self._max]

    def _checked(self, names, position, velocity):
        pos = pick_values(names, position, self._names)
        vel = pick_values(names, velocity, self._names) if len(velocity) else [0.0] * len(self._names)
        for got in (pos, vel):
            if isinstance(got, Rejection):
                return got
        refs = {}
        for j, (p, v) in enumerate(zip(pos, vel)):
            if p is None:
                continue
            v, lim = 0.0 if v is None else v, self.limits[j]
            if abs(v) > lim.link_speed:
                return Rejection(f"{self._names[j]}: reference speed {v:+.4g} rad/s beyond the "
                                 f"{lim.link_speed} rad/s link speed limit")
            inside = min(max(p, lim.position_lower), lim.position_upper)
            if inside != p:
                self.clipped += 1
                self.last_issue = Rejection(f"{self._names[j]}: reference position {p:+.4g} rad clipped to {inside} rad")
            refs[j] = Held(Reference(inside, v))
        return refs or Rejection("no configured joint named")

    def at(self, t: float) -> list:
        """Apply everything due at ``t`` (s); the Reference of each joint at ``t`` (None where no
        reference came yet). ``current`` keeps each joint's entry (Held sample or motion)."""
        while self._pending and self._pending[0][0] <= t:
            for j, ref in self._pending.pop(0)[2].items():
                self.current[j] = ref
        return [None if ref is None else ref.sample(t) for ref in self.current]

    def clear(self) -> None:
        """Forget the current and pending references (after a reset the law holds the measured position)."""
        self._pending.clear()
        self.current = [None] * len(self._names)


def _peak_speed(ref) -> float:
    """Largest |q_d'| (rad/s) a queued entry asks for: a held sample's speed, a motion's exact peak."""
    return abs(ref.value.dq) if isinstance(ref, Held) else ref.peak_speed()
