"""sensor_msgs/JointState contents as plain sequences: decode readings, references and commands,
encode simulated states, and time the control ticks. No ROS here: the nodes pass the message
fields (name, position, velocity, effort lists; stamps in seconds).

Layout on ``joint_states`` (see the interface notes): per joint a link entry (position q,
velocity q', effort = spring torque) and a motor entry (position theta, velocity theta' link
side, effort = applied motor torque).
"""
from __future__ import annotations

import enum
import math
from dataclasses import dataclass

from compliant_damping.control.sample import JointSample

__all__ = ["Rejection", "StateDecoder", "encode_states", "pick_values", "Stamp",
           "StampOrder", "TickClock"]


@dataclass(frozen=True)
class Rejection:
    """Why a message was not used (for people; counted by its receiver)."""

    reason: str


def _finite(values) -> bool:
    return all(math.isfinite(v) for v in values)


class StateDecoder:
    """Readings of the configured joints from one joint-state message; counts rejected messages.

    joints: ``config.ControllerJoint`` entries (their ``link_state``/``motor_state`` names);
    spring_torque_from_effort: take tau_s from the link entry's effort (else tau_s is None).
    """

    def __init__(self, joints, spring_torque_from_effort: bool):
        self._entries = [(j.link_state, j.motor_state) for j in joints]
        self._from_effort = spring_torque_from_effort
        self.rejected = 0
        self.last_rejection: Rejection | None = None

    def decode(self, names, position, velocity, effort):
        """List of JointSample in joint order, or the :class:`Rejection` of the message."""
        result = self._decode(list(names), position, velocity, effort)
        if isinstance(result, Rejection):
            self.rejected += 1
            self.last_rejection = result
        return result

    def _decode(self, names, position, velocity, effort):
        n = len(names)
        if len(position) != n or len(velocity) != n or len(effort) not in (0, n):
            return Rejection(f"field lengths differ: {n} names, {len(position)} positions, "
                             f"{len(velocity)} velocities, {len(effort)} efforts")
        index = {name: i for i, name in enumerate(names)}
        if len(index) != n:
            return Rejection("repeated names")
        if self._from_effort and not effort:
            return Rejection("no effort field (spring_torque_source is effort)")
        samples = []
        for link, motor in self._entries:
            if link not in index or motor not in index:
                return Rejection(f"no entry {link if link not in index else motor!r}")
            i, m = index[link], index[motor]
            values = [position[i], velocity[i], position[m], velocity[m]]
            if self._from_effort:
                values.append(effort[i])
            if not _finite(values):
                return Rejection(f"non-finite value for {link!r}/{motor!r}")
            samples.append(JointSample(*values[:4], values[4] if self._from_effort else None))
        return samples


def encode_states(joint_names, readings, applied):
    """(name, position, velocity, effort) lists for readings (JointSample per joint) and applied torques (N m)."""
    name, pos, vel, eff = [], [], [], []
    for j, s, tau in zip(joint_names, readings, applied):
        name += [j, f"{j}_motor"]
        pos += [s.q, s.theta]
        vel += [s.dq, s.dtheta]
        eff += [s.tau_s, float(tau)]
    return name, pos, vel, eff


def pick_values(names, values, wanted):
    """Value per name in ``wanted`` (None where absent), or the :class:`Rejection` of a malformed message."""
    if len(values) != len(names):
        return Rejection(f"{len(names)} names but {len(values)} values")
    if len(set(names)) != len(names):
        return Rejection("repeated names")
    index = dict(zip(names, values))
    out = [index.get(w) for w in wanted]
    bad = [w for w, v in zip(wanted, out) if v is not None and not math.isfinite(v)]
    if bad:
        return Rejection(f"non-finite value for {', '.join(bad)}")
    return out


class Stamp(enum.Enum):
    """How a joint-state stamp relates to the ones answered before (:class:`StampOrder`)."""

    NEW = "new"
    REPEATED = "repeated"
    OLDER = "older"
    AHEAD = "ahead"


class StampOrder:
    """Classifies joint-state stamps: new, a repeat of the last answered, older, or too far ahead.

    ``ahead_tolerance`` (s): a stamp more than this ahead of the receiver's clock is not used
    (a driver clock far off, or a forged stamp, would otherwise freeze the slew limit's
    monotonic time). Unstamped messages (stamp 0) take the receiver's clock.
    """

    def __init__(self, ahead_tolerance: float):
        self.ahead_tolerance = ahead_tolerance
        self.last: float | None = None  # newest answered stamp (s)

    def classify(self, stamp: float, now: float) -> Stamp:
        """Kind of a message stamped ``stamp`` (s) received at ``now`` (s) on the receiver's clock."""
        if self.last is not None and stamp == self.last:
            return Stamp.REPEATED
        if self.last is not None and stamp < self.last:
            return Stamp.OLDER
        if stamp - now > self.ahead_tolerance:
            return Stamp.AHEAD
        return Stamp.NEW

    def accept(self, stamp: float) -> None:
        """``stamp`` (s) was answered: it becomes the last."""
        self.last = stamp

    def rejection(self, kind: Stamp, stamp: float, now: float) -> Rejection:
        """The :class:`Rejection` of an OLDER or AHEAD stamp."""
        if kind is Stamp.OLDER:
            return Rejection(f"stamp {stamp:.6f} s older than the last answered {self.last:.6f} s")
        return Rejection(f"stamp {stamp - now:.3f} s ahead of the clock (tolerance {self.ahead_tolerance} s)")


class TickClock:
    """Tick interval from successive stamps (s), clamped to [0, 2] periods, with late-tick and rate counts.

    A tick is late when its interval exceeds 1.5 periods (common practice for jitter reports).
    """

    def __init__(self, period: float):
        self.period = period
        self.late = 0
        self._last: float | None = None
        self._start: float | None = None  # rate window: first stamp and ticks after it
        self._count = 0

    def interval(self, t: float) -> float:
        """dt (s) for a tick at ``t``; the first tick gets one period."""
        raw = self.period if self._last is None else t - self._last
        self._last = t
        if raw > 1.5 * self.period:
            self.late += 1
        if self._start is None:
            self._start = t
        else:
            self._count += 1
        return min(max(raw, 0.0), 2.0 * self.period)

    def rate(self) -> float:
        """Ticks per second since the previous call (0 without two ticks); starts a new window."""
        count, span = self._count, (self._last - self._start) if self._start is not None else 0.0
        self._start, self._count = self._last, 0
        return count / span if count and span > 0.0 else 0.0
