"""Link-side references: desired position with its first two time derivatives.

Each reference is a small immutable object; ``sample(t)`` returns a
:class:`sample.Reference` ``(q_d, q_d', q_d'')`` in rad, rad/s, rad/s^2.
"""
from __future__ import annotations

import math
from dataclasses import dataclass

from compliant_damping.control.sample import Reference

__all__ = ["Constant", "Step", "Ramp", "SmoothStep", "Cruise", "Sinusoid"]


@dataclass(frozen=True)
class Constant:
    """Constant set point (rad)."""

    position: float

    def sample(self, t: float):
        return Reference(self.position, 0.0, 0.0)


@dataclass(frozen=True)
class Step:
    """Step from ``start`` to ``end`` (rad) at time ``at`` (s); derivatives are zero."""

    start: float
    end: float
    at: float = 0.0

    def sample(self, t: float):
        return Reference((self.end if t >= self.at else self.start), 0.0, 0.0)


@dataclass(frozen=True)
class Ramp:
    """Constant-speed ramp from ``start`` (rad) at ``speed`` (rad/s), from ``at`` (s) for ``duration`` (s)."""

    start: float
    speed: float
    at: float = 0.0
    duration: float = math.inf

    def sample(self, t: float):
        if t < self.at:
            return Reference(self.start, 0.0, 0.0)
        if t >= self.at + self.duration:
            return Reference(self.start + self.speed * self.duration, 0.0, 0.0)
        return Reference(self.start + self.speed * (t - self.at), self.speed, 0.0)


def _min_jerk(u: float):
    """s(u) = 10u^3 - 15u^4 + 6u^5 on [0, 1], its first two derivatives and its integral from 0."""
    return (u**3 * (10.0 - 15.0 * u + 6.0 * u * u), 30.0 * u * u * (1.0 - u) ** 2,
            60.0 * u * (1.0 - 3.0 * u + 2.0 * u * u), u**4 * (2.5 - 3.0 * u + u * u))


@dataclass(frozen=True)
class SmoothStep:
    """Quintic rest-to-rest transition from ``start`` to ``end`` (rad) over ``duration`` (s) from ``at`` (s).

    s(u) = 10u^3 - 15u^4 + 6u^5 has zero velocity and acceleration at both ends
    (the minimum-jerk profile).
    """

    start: float
    end: float
    duration: float
    at: float = 0.0

    def sample(self, t: float):
        u = min(max((t - self.at) / self.duration, 0.0), 1.0)
        span = self.end - self.start
        s, ds, dds, _ = _min_jerk(u)
        return Reference(self.start + span * s, span * ds / self.duration, span * dds / self.duration**2)


@dataclass(frozen=True)
class Cruise:
    """Move from ``start`` to ``end`` (rad) at constant ``speed`` (rad/s), from ``at`` (s).

    The speed ramps up and down over ``blend`` seconds each with the minimum-jerk profile
    s(u) above, so position, speed and acceleration are continuous. Needs
    ``|end - start| >= speed * blend`` (each blend covers ``speed * blend / 2``).
    """

    start: float
    end: float
    speed: float
    blend: float
    at: float = 0.0

    def __post_init__(self):
        if not (self.speed > 0.0 and self.blend > 0.0 and abs(self.end - self.start) >= self.speed * self.blend):
            raise ValueError(f"speed: need speed, blend > 0 and |end - start| >= speed * blend "
                             f"(got {self.speed} rad/s, {self.blend} s over {abs(self.end - self.start)} rad)")

    def sample(self, t: float):
        v = math.copysign(self.speed, self.end - self.start)
        tb = self.blend
        cruise = abs(self.end - self.start) / self.speed - tb  # s at constant speed
        tau = t - self.at
        if tau <= 0.0:
            return Reference(self.start, 0.0, 0.0)
        if tau < tb:
            s, ds, _, area = _min_jerk(tau / tb)
            return Reference(self.start + v * tb * area, v * s, v * ds / tb)
        if tau < tb + cruise:
            return Reference(self.start + v * (tau - 0.5 * tb), v, 0.0)
        if tau < 2.0 * tb + cruise:
            u = (tau - tb - cruise) / tb
            s, ds, _, area = _min_jerk(u)
            return Reference(self.start + v * (cruise + 0.5 * tb + tb * (u - area)), v * (1.0 - s), -v * ds / tb)
        return Reference(self.end, 0.0, 0.0)


@dataclass(frozen=True)
class Sinusoid:
    """``offset + amplitude sin(2 pi frequency (t - at))`` for t >= at, ``offset`` before (rad, Hz, s)."""

    offset: float
    amplitude: float
    frequency: float
    at: float = 0.0

    def sample(self, t: float):
        if t < self.at:
            return Reference(self.offset, 0.0, 0.0)
        w = 2.0 * math.pi * self.frequency
        s, c = math.sin(w * (t - self.at)), math.cos(w * (t - self.at))
        return Reference(self.offset + self.amplitude * s, self.amplitude * w * c, -self.amplitude * w * w * s)
