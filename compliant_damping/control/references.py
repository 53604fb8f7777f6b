"""Link-side references: desired position with its first four time derivatives.

Each reference is a small immutable object; ``sample(t)`` returns a :class:`sample.Reference`
``(q_d, q_d', q_d'', q_d''', q_d'''')`` in rad, rad/s, rad/s^2, rad/s^3, rad/s^4.

Two kinds, which the laws treat differently (laws.check_reference):

* set points (``set_points = True``): piecewise constant, every derivative zero. The laws
  regulate each value in turn; a step between values is a set-point change.
* motions: ``smoothness`` is the highest derivative that is continuous at every time. The
  tracking laws feed the reference's inverse dynamics forward and need ``smoothness >= 4``
  (design notes, section 4, motion tracking): :class:`Sinusoid`, :class:`RestToRest`,
  :class:`WaypointSpline` and :class:`Cruise` have it.
"""
from __future__ import annotations

import bisect
import math
from dataclasses import dataclass, field

import numpy as np
from scipy.interpolate import PPoly, make_interp_spline

from compliant_damping.control.sample import Reference

__all__ = ["DERIVATIVES", "Constant", "Held", "Step", "RestToRest", "MinimumJerk", "Cruise", "Sinusoid",
           "WaypointSpline", "rest_profile", "spline_through"]

DERIVATIVES = 4  # derivatives a reference gives; smoothness counts up to this


@dataclass(frozen=True)
class Constant:
    """Constant set point (rad)."""

    position: float
    set_points = True
    smoothness = DERIVATIVES

    def sample(self, t: float) -> Reference:
        return Reference(self.position)


@dataclass(frozen=True)
class Held:
    """One streamed reference sample (position and its derivatives), held until the next arrives."""

    value: Reference

    def sample(self, t: float) -> Reference:
        return self.value


@dataclass(frozen=True)
class Step:
    """Set point ``start`` (rad) until ``at`` (s), ``end`` (rad) from then on."""

    start: float
    end: float
    at: float = 0.0
    set_points = True
    smoothness = -1  # the position itself jumps

    def sample(self, t: float) -> Reference:
        return Reference(self.end if t >= self.at else self.start)


def rest_profile(u: float) -> tuple:
    """Rest-to-rest profile ``s(u) = 126u^5 - 420u^6 + 540u^7 - 315u^8 + 70u^9`` on [0, 1], u clipped.

    The polynomial of least degree with s(0) = 0, s(1) = 1 and derivatives 1 to 4 zero at both
    ends (solve the ten end conditions; e.g. Biagiotti and Melchiorri, Trajectory Planning for
    Automatic Machines and Robots, on polynomial profiles). Joined to rest on both sides it is
    continuous up to its fourth derivative. Returns ``(s, s', s'', s''', s'''', S)`` with
    derivatives in u and ``S(u)`` the integral of s from 0.
    """
    u = min(max(u, 0.0), 1.0)
    v = 1.0 - u
    return (u**5 * (126.0 - 420.0 * u + 540.0 * u * u - 315.0 * u**3 + 70.0 * u**4),
            630.0 * u**4 * v**4,
            2520.0 * u**3 * v**3 * (1.0 - 2.0 * u),
            2520.0 * u**2 * v**2 * (3.0 - 14.0 * u + 14.0 * u * u),
            15120.0 * u * v * (1.0 - 2.0 * u) * (1.0 - 7.0 * u + 7.0 * u * u),
            u**6 * (21.0 - 60.0 * u + 67.5 * u * u - 35.0 * u**3 + 7.0 * u**4))


@dataclass(frozen=True)
class RestToRest:
    """Rest-to-rest move from ``start`` to ``end`` (rad) over ``duration`` (s) from ``at`` (s),
    with the profile of :func:`rest_profile` (continuous up to the fourth derivative)."""

    start: float
    end: float
    duration: float
    at: float = 0.0
    set_points = False
    smoothness = DERIVATIVES

    def __post_init__(self):
        if not self.duration > 0.0:
            raise ValueError(f"duration: a rest-to-rest move needs a positive duration, got {self.duration} s")

    def sample(self, t: float) -> Reference:
        s, s1, s2, s3, s4, _ = rest_profile((t - self.at) / self.duration)
        span, d = self.end - self.start, self.duration
        return Reference(self.start + span * s, span * s1 / d, span * s2 / d**2, span * s3 / d**3, span * s4 / d**4)

    @property
    def motion_span(self) -> tuple:
        """(first, last) time (s) of the motion; at rest outside it."""
        return self.at, self.at + self.duration


@dataclass(frozen=True)
class MinimumJerk:
    """Quintic rest-to-rest move from ``start`` to ``end`` (rad) over ``duration`` (s) from ``at`` (s).

    s(u) = 10u^3 - 15u^4 + 6u^5, the minimum-jerk profile (Flash and Hogan, 1985): velocity and
    acceleration are zero at both ends but the jerk jumps there (``smoothness = 2``), so the
    tracking laws refuse it; motor_pd follows it.
    """

    start: float
    end: float
    duration: float
    at: float = 0.0
    set_points = False
    smoothness = 2

    def __post_init__(self):
        if not self.duration > 0.0:
            raise ValueError(f"duration: a rest-to-rest move needs a positive duration, got {self.duration} s")

    def sample(self, t: float) -> Reference:
        u = (t - self.at) / self.duration
        span, d = self.end - self.start, self.duration
        if not 0.0 < u < 1.0:
            return Reference(self.end if u >= 1.0 else self.start)
        return Reference(self.start + span * u**3 * (10.0 - 15.0 * u + 6.0 * u * u),
                         span * 30.0 * u * u * (1.0 - u) ** 2 / d,
                         span * 60.0 * u * (1.0 - 3.0 * u + 2.0 * u * u) / d**2,
                         span * (60.0 - 360.0 * u + 360.0 * u * u) / d**3,
                         span * (720.0 * u - 360.0) / d**4)


@dataclass(frozen=True)
class Cruise:
    """Move from ``start`` to ``end`` (rad) at constant ``speed`` (rad/s), from ``at`` (s).

    The speed ramps up over ``blend`` seconds and down over ``brake`` seconds (default: ``blend``)
    with the profile s(u) of :func:`rest_profile`, so the position is continuous up to its fifth
    derivative. Needs ``|end - start| >= speed (blend + brake) / 2`` (each ramp covers half its
    time at full speed).
    """

    start: float
    end: float
    speed: float
    blend: float
    at: float = 0.0
    brake: float | None = None
    set_points = False
    smoothness = DERIVATIVES

    def __post_init__(self):
        brake = self.blend if self.brake is None else self.brake
        object.__setattr__(self, "brake", brake)
        if not (self.speed > 0.0 and self.blend > 0.0 and brake > 0.0
                and abs(self.end - self.start) >= 0.5 * self.speed * (self.blend + brake)):
            raise ValueError(f"speed: need speed, blend, brake > 0 and |end - start| >= speed (blend + brake) / 2 "
                             f"(got {self.speed} rad/s, {self.blend} s and {brake} s over "
                             f"{abs(self.end - self.start)} rad)")

    @property
    def motion_span(self) -> tuple:
        """(first, last) time (s) of the motion; at rest outside it."""
        return self.at, self.at + abs(self.end - self.start) / self.speed + 0.5 * (self.blend + self.brake)

    def sample(self, t: float) -> Reference:
        v = math.copysign(self.speed, self.end - self.start)
        tb, tr = self.blend, self.brake
        cruise = abs(self.end - self.start) / self.speed - 0.5 * (tb + tr)  # s at constant speed
        tau = t - self.at
        if tau <= 0.0:
            return Reference(self.start)
        if tau < tb:  # speed v s(u)
            s, s1, s2, s3, _, area = rest_profile(tau / tb)
            return Reference(self.start + v * tb * area, v * s, v * s1 / tb, v * s2 / tb**2, v * s3 / tb**3)
        if tau < tb + cruise:
            return Reference(self.start + v * (tau - 0.5 * tb), v)
        if tau < tb + cruise + tr:  # speed v (1 - s(u))
            u = (tau - tb - cruise) / tr
            s, s1, s2, s3, _, area = rest_profile(u)
            return Reference(self.start + v * (0.5 * tb + cruise + tr * (u - area)), v * (1.0 - s), -v * s1 / tr,
                             -v * s2 / tr**2, -v * s3 / tr**3)
        return Reference(self.end)


@dataclass(frozen=True)
class Sinusoid:
    """``offset + amplitude sin(2 pi frequency (t - at))`` at every time (rad, Hz, s): smooth throughout.

    A run that starts on it (sim/scenarios.py, ``track_sinusoid``) starts moving at its speed.
    """

    offset: float
    amplitude: float
    frequency: float
    at: float = 0.0
    set_points = False
    smoothness = DERIVATIVES

    def sample(self, t: float) -> Reference:
        w = 2.0 * math.pi * self.frequency
        a, phase = self.amplitude, w * (t - self.at)
        s, c = math.sin(phase), math.cos(phase)
        return Reference(self.offset + a * s, a * w * c, -a * w**2 * s, -a * w**3 * c, a * w**4 * s)


@dataclass(frozen=True)
class WaypointSpline:
    """Rest-to-rest spline through ``positions`` (rad) at ``times`` (s, increasing), at rest before
    the first and after the last.

    A ninth-degree interpolating spline (scipy.interpolate.make_interp_spline, k = 9) with
    derivatives 1 to 4 zero at both ends: continuous up to the fourth derivative everywhere,
    the joins to rest included. It is kept as Taylor coefficients per interval, so a sample (all
    four derivatives) is one small matrix product, and the extremes are roots of polynomials.
    """

    times: tuple
    positions: tuple
    set_points = False
    smoothness = DERIVATIVES
    _taylor: np.ndarray = field(init=False, repr=False, compare=False)

    def __post_init__(self):
        t, y = np.asarray(self.times, dtype=float), np.asarray(self.positions, dtype=float)
        if t.ndim != 1 or t.shape != y.shape or len(t) < 2:
            raise ValueError(f"positions: need as many positions as times, at least two (got {len(y)} and {len(t)})")
        if not (np.all(np.isfinite(t)) and np.all(np.isfinite(y))):
            raise ValueError("times: waypoints must be finite")
        if not np.all(np.diff(t) > 0.0):
            raise ValueError(f"times: must increase strictly, got {t.tolist()}")
        rest = [(d, 0.0) for d in range(1, DERIVATIVES + 1)]
        degree = 2 * DERIVATIVES + 1
        spline = make_interp_spline(t, y, k=degree, bc_type=(rest, rest))
        # Taylor coefficients of the position at the start of each interval, x^0 first; derivative d
        # has coefficients a_{j+d} (j+d)!/j! (PPoly.from_spline would go through FITPACK, which
        # handles degree <= 5 only and crashed on 9 here)
        position = np.array([spline(t[:-1], nu=m) / math.factorial(m) for m in range(degree + 1)])
        taylor = np.zeros((DERIVATIVES + 2, degree + 1, len(t) - 1))
        for d in range(DERIVATIVES + 2):
            for j in range(degree + 1 - d):
                taylor[d, j] = position[j + d] * math.factorial(j + d) / math.factorial(j)
        object.__setattr__(self, "_taylor", taylor)

    @property
    def motion_span(self) -> tuple:
        """(first, last) time (s) of the motion; at rest outside it."""
        return self.times[0], self.times[-1]

    def _piece(self, derivative: int) -> PPoly:
        """The ``derivative``-th derivative as a scipy PPoly (power basis, highest power first)."""
        degree = self._taylor.shape[1] - 1 - derivative
        return PPoly(self._taylor[derivative, degree::-1], np.asarray(self.times, dtype=float))

    def extremes(self, derivative: int) -> tuple:
        """(min, max) of the position (``derivative`` 0) or one of its derivatives over all time.

        Exact up to round-off: the extremes lie at the waypoints or where the next derivative
        vanishes, found as roots of the piecewise polynomial (scipy.interpolate.PPoly.roots).
        """
        roots = self._piece(derivative + 1).roots(extrapolate=False)
        candidates = np.concatenate([self.times, roots[np.isfinite(roots)]])
        values = self._piece(derivative)(candidates)
        rest = [float(self.positions[0]), float(self.positions[-1])] if derivative == 0 else [0.0]
        return min(float(values.min()), *rest), max(float(values.max()), *rest)

    def peak_speed(self) -> float:
        """Largest |q_d'| (rad/s) over all time (:meth:`extremes` of the first derivative)."""
        return max(abs(v) for v in self.extremes(1))

    def sample(self, t: float) -> Reference:
        t0, t1 = self.times[0], self.times[-1]
        if t <= t0 or t >= t1:
            return Reference(float(self.positions[0] if t <= t0 else self.positions[-1]))
        i = bisect.bisect_right(self.times, t) - 1
        x = t - self.times[i]
        values = self._taylor[:DERIVATIVES + 1, :, i] @ x ** np.arange(self._taylor.shape[1])
        return Reference(*map(float, values))


def spline_through(motion, spacing: float) -> WaypointSpline:
    """The :class:`WaypointSpline` through ``motion``'s positions at knots at most ``spacing`` s apart.

    ``motion`` is a rest-to-rest motion (it has ``motion_span``): the spline is at rest where it
    is. Knot times are whole nanoseconds, so a ROS message (stamps and durations in ns) carries
    them exactly. This is how a motion goes over ROS (nodes/scenario_player.py) and what the
    offline simulator is given to reproduce that run.

    Raises
    ------
    ValueError
        ``motion`` does not start and end at rest (a sinusoid, say), or ``spacing`` is not positive.
    """
    if not hasattr(motion, "motion_span"):
        raise ValueError(f"reference: {type(motion).__name__} does not start and end at rest; a trajectory "
                         "through waypoints does (use a rest-to-rest move, a cruise or a waypoint spline)")
    if not spacing > 0.0:
        raise ValueError(f"spacing: need a positive knot spacing, got {spacing} s")
    first, last = (round(t * 1e9) for t in motion.motion_span)
    count = max(1, math.ceil((last - first) * 1e-9 / spacing - 1e-9))
    times = [(first + (last - first) * k // count) * 1e-9 for k in range(count + 1)]
    return WaypointSpline(tuple(times), tuple(motion.sample(t).q for t in times))
