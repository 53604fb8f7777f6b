"""sensor_msgs/JointState contents as plain sequences: decode readings, references and commands,
encode simulated states, and time the control ticks. No ROS here: the nodes pass the message
fields (name, position, velocity, effort lists; stamps in seconds).

Layout on ``joint_states`` (see the interface notes): per joint a link entry (position q,
velocity q', effort = spring torque) and a motor entry (position theta, velocity theta' link
side, effort = applied motor torque).
"""
from __future__ import annotations

import bisect
import math

from .sample import JointSample


def _finite(values) -> bool:
    return all(math.isfinite(v) for v in values)


class StateDecoder:
    """Readings of the configured joints from one joint-state message; counts rejected messages.

    joints: ``config.ControllerJoint`` entries (their ``link_state``/``motor_state`` names);
    spring_torque_from_effort: take tau_s from the link entry's effort (else tau_s is NaN).
    """

    def __init__(self, joints, spring_torque_from_effort: bool):
        self._entries = [(j.link_state, j.motor_state) for j in joints]
        self._from_effort = spring_torque_from_effort
        self.rejected = 0
        self.last_reason: str | None = None

    def decode(self, names, position, velocity, effort):
        """List of JointSample in joint order, or the reason (str) why the message is rejected."""
        result = self._decode(list(names), position, velocity, effort)
        if isinstance(result, str):
            self.rejected += 1
            self.last_reason = result
        return result

    def _decode(self, names, position, velocity, effort):
        n = len(names)
        if len(position) != n or len(velocity) != n or len(effort) not in (0, n):
            return (f"field lengths differ: {n} names, {len(position)} positions, "
                    f"{len(velocity)} velocities, {len(effort)} efforts")
        index = {name: i for i, name in enumerate(names)}
        if len(index) != n:
            return "repeated names"
        if self._from_effort and not effort:
            return "no effort field (spring_torque_source is effort)"
        samples = []
        for link, motor in self._entries:
            if link not in index or motor not in index:
                return f"no entry {link if link not in index else motor!r}"
            i, m = index[link], index[motor]
            values = [position[i], velocity[i], position[m], velocity[m]]
            if self._from_effort:
                values.append(effort[i])
            if not _finite(values):
                return f"non-finite value for {link!r}/{motor!r}: {values}"
            samples.append(JointSample(*values[:4], values[4] if self._from_effort else math.nan))
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
    """Value per name in ``wanted`` (None where absent), or a reason (str) for a malformed or non-finite message."""
    if len(values) != len(names):
        return f"{len(names)} names but {len(values)} values"
    index = dict(zip(names, values))
    out = [index.get(w) for w in wanted]
    if not _finite(v for v in out if v is not None):
        return f"non-finite value in {list(zip(wanted, out))}"
    return out


class ReferenceSchedule:
    """Link references (q_d, q_d', q_d'') per joint that take effect at their stamp.

    A reference stamped zero (or in the past) applies at the next tick; a future stamp
    applies from the first tick at or after it, so a scenario can be streamed ahead of time.
    """

    def __init__(self, joint_names, max_pending: int = 10000):
        self._names = list(joint_names)
        self._pending: list = []   # sorted (stamp s, sequence, {joint index: ref})
        self._seq = 0
        self._max = max_pending
        self.current = [None] * len(self._names)

    def __len__(self) -> int:
        """Number of references waiting for their stamp."""
        return len(self._pending)

    def add(self, stamp: float, names, position, velocity):
        """Queue one message; returns a reason (str) when it is malformed, else None."""
        pos = pick_values(names, position, self._names)
        vel = pick_values(names, velocity, self._names) if len(velocity) else [0.0] * len(self._names)
        for got in (pos, vel):
            if isinstance(got, str):
                return got
        refs = {j: (p, v if v is not None else 0.0, 0.0) for j, (p, v) in enumerate(zip(pos, vel)) if p is not None}
        if not refs:
            return "no configured joint named"
        self._seq += 1
        bisect.insort(self._pending, (stamp, self._seq, refs), key=lambda e: (e[0], e[1]))
        del self._pending[:-self._max]
        return None

    def at(self, t: float):
        """Apply everything due at ``t`` (s); returns ``current`` (None where no reference came yet)."""
        while self._pending and self._pending[0][0] <= t:
            for j, ref in self._pending.pop(0)[2].items():
                self.current[j] = ref
        return self.current


class TickClock:
    """Tick interval from successive stamps (s), clamped to [0.5, 2] periods, with late-tick and rate counts.

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
        return min(max(raw, 0.5 * self.period), 2.0 * self.period)

    def rate(self) -> float:
        """Ticks per second since the previous call (0 without two ticks); starts a new window."""
        count, span = self._count, (self._last - self._start) if self._start is not None else 0.0
        self._start, self._count = self._last, 0
        return count / span if count and span > 0.0 else 0.0
