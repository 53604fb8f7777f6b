"""The typed values every law and the safety filter take: a joint's reading and its reference."""
from __future__ import annotations

import math
from typing import NamedTuple

import numpy as np

__all__ = ["JointSample", "Reference", "stack_references"]


class JointSample(NamedTuple):
    """Measured state of one series-elastic joint, link-side units.

    q, dq: link position (rad) and speed (rad/s); theta, dtheta: motor position
    (rad) and speed (rad/s) reflected through the gear; tau_s: spring torque
    (N m) when a torque sensor reports it, None otherwise.
    """

    q: float
    dq: float
    theta: float
    dtheta: float
    tau_s: float | None = None

    def is_finite(self) -> bool:
        """True when the four kinematic readings are finite (the spring torque is checked by
        whoever uses it: safety.SafetyFilter with ``torque_reading``)."""
        isfinite = math.isfinite  # spelled out: called several times per control tick
        return isfinite(self.q) and isfinite(self.dq) and isfinite(self.theta) and isfinite(self.dtheta)


class Reference(NamedTuple):
    """Desired link motion of one joint (or, with arrays, of every joint of a robot).

    q: position (rad); dq: speed (rad/s); ddq: acceleration (rad/s^2); dddq: jerk (rad/s^3);
    ddddq: fourth derivative (rad/s^4). The tracking laws feed the reference's inverse dynamics
    forward and need all four derivatives (design notes, section 4, motion tracking); a set point
    leaves them zero.
    """

    q: float
    dq: float = 0.0
    ddq: float = 0.0
    dddq: float = 0.0
    ddddq: float = 0.0

    def is_finite(self) -> bool:
        """True when the position and all four derivatives are finite (every entry, for arrays).

        Checked every control tick, so a robot's reference (arrays) is checked in one array operation.
        """
        values = tuple(self)
        if any(isinstance(v, np.ndarray) for v in values):
            return bool(np.isfinite(np.hstack(values)).all())
        return all(math.isfinite(v) for v in values)


def stack_references(refs) -> Reference:
    """One Reference of arrays (joint order) from the per-joint References ``refs``."""
    return Reference(*(np.array(column, dtype=float) for column in zip(*refs)))
