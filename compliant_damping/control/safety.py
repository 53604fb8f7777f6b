"""Safety filter for one joint: always on, after every law, before the motor.

Per tick it checks the measurement and the law's torque, then limits the
command (design notes, section 5):

* a non-finite reading or torque, a spring deflection, link position, link or
  motor speed beyond its limit: a :class:`Fault` with a stable :class:`FaultCode`
  and a reason for people;
* in fault (safe mode) the target torque is zero (``zero_torque``) or motor-side
  damping ``-safe_damping * theta'`` (``motor_damping``) on a *trusted* motor speed
  only (see :meth:`SafetyFilter.safe_target`), itself saturated;
* always ``|tau| <= torque`` and, in stamp time, ``|tau_k - tau_j| <= torque_rate *
  (t_k - t_j)`` for any two commands (see :meth:`SafetyFilter.limit`).

Time is the stamp time of the readings (s), made monotonic per joint: a stamp older than
the newest one seen counts as no time passing, so messages faster than the nominal rate,
bursts or jittery stamps cannot add slew budget up. After a gap the first command may
move by at most ``torque_rate * min(gap, MAX_SLEW_WINDOW periods)``: a late tick catches
up two periods' worth of slew, no more.

A fault latches: only :meth:`SafetyFilter.reset` clears it, and only while the
last reading is within limits.
"""
from __future__ import annotations

import enum
import math
from dataclasses import dataclass, fields

from compliant_damping.control.sample import JointSample
from compliant_damping.fields import param

__all__ = ["SAFE_MODES", "MAX_RAMP_DOWN", "MAX_SLEW_WINDOW", "FaultCode", "Fault", "Limits",
           "SafetyFilter", "relaxations", "motor_accel_bound"]

SAFE_MODES = ("zero_torque", "motor_damping")
MAX_RAMP_DOWN = 10.0   # s: longest ramp from the torque limit to zero a file may ask for (torque / torque_rate)
MAX_SLEW_WINDOW = 2.0  # control periods of slew budget the first command after a gap may use


class FaultCode(enum.Enum):
    """Stable fault codes (for machines and diagnostics); the value is the code's text."""

    NON_FINITE_READING = "non_finite_reading"
    DEFLECTION = "deflection"
    POSITION = "position"
    LINK_SPEED = "link_speed"
    MOTOR_SPEED = "motor_speed"
    NON_FINITE_TORQUE = "non_finite_torque"
    NON_FINITE_REFERENCE = "non_finite_reference"
    NO_READING = "no_reading"
    WATCHDOG = "watchdog"
    STAMP_STUCK = "stamp_stuck"
    CLOCK_STOPPED = "clock_stopped"
    STOP_REQUESTED = "stop_requested"
    COMMAND_CONFLICT = "command_conflict"
    OTHER_JOINT = "other_joint"


@dataclass(frozen=True)
class Fault:
    """Why a joint is (or stays) in safe mode: a stable ``code`` and a short ``reason``."""

    code: FaultCode
    reason: str

    def __str__(self) -> str:
        return f"{self.code.value}: {self.reason}"

    def to_dict(self) -> dict:
        """``{"code": ..., "reason": ...}`` for JSON."""
        return {"code": self.code.value, "reason": self.reason}


def _num(x: float) -> str:
    """A reading for a reason text: four significant digits, whatever its size."""
    return f"{x:+.4g}"


@dataclass(frozen=True)
class Limits:
    """Safety limits of one joint (SI units). Infinite position/speed limits disable that check."""

    torque: float = param("N m", "positive", "motor torque limit |tau_m|", 10.0, required=True)
    torque_rate: float = param("N m/s", "positive", "motor torque slew limit |d tau_m/dt|", 1.0e3, required=True)
    deflection: float = param("rad", "positive", "spring deflection limit |theta - q|", 0.2, required=True)
    position_lower: float = param("rad", "not_nan", "lowest allowed link position", -math.inf)
    position_upper: float = param("rad", "not_nan", "highest allowed link position", math.inf)
    link_speed: float = param("rad/s", "limit", "link speed limit |q'|", math.inf)
    motor_speed: float = param("rad/s", "limit", "motor speed limit |theta'| (link side)", math.inf)
    safe_damping: float = param("N m s/rad", "nonnegative", "motor-side damping in motor_damping safe mode", 0.0)
    driver_torque: float = param("N m", "limit", "rated torque of the motor driver; torque may not exceed it", math.inf)
    speed_tolerance: float = param("rad/s", "positive",
                                   "motor-speed plausibility tolerance of motor_damping safe mode: allowed "
                                   "disagreement of theta' with the motor's displacement per tick "
                                   "(encoder quantum / period plus noise)", 0.5)

    def __post_init__(self):
        if not self.position_lower < self.position_upper:
            raise ValueError(f"position_lower: must be below position_upper ({self.position_upper})")
        if self.torque > self.driver_torque:
            raise ValueError(f"torque: {self.torque} N m is above the driver's {self.driver_torque} N m")
        if self.torque / self.torque_rate > MAX_RAMP_DOWN:
            raise ValueError(f"torque_rate: a ramp from the torque limit to zero would take "
                             f"{self.torque / self.torque_rate:.3g} s, more than the {MAX_RAMP_DOWN} s allowed")


# Which way each limit tightens: +1 when a smaller value is stricter, -1 when a larger one is.
_TIGHTER = {"torque": 1, "torque_rate": 1, "deflection": 1, "position_lower": -1, "position_upper": 1,
            "link_speed": 1, "motor_speed": 1, "driver_torque": 1, "speed_tolerance": 1}


def relaxations(old: Limits, new: Limits) -> list:
    """Names of the limits that ``new`` relaxes against ``old`` (safe_damping is a gain, not a limit)."""
    return [f.name for f in fields(Limits) if f.name in _TIGHTER
            and _TIGHTER[f.name] * (getattr(new, f.name) - getattr(old, f.name)) > 0.0]


def motor_accel_bound(limits: Limits, motor_inertia: float, spring_stiffness: float) -> float:
    """Largest plausible motor acceleration (rad/s^2) for the speed plausibility check.

    Newton on the motor, B theta'' = tau_m - tau_s - friction, with |tau_m| at most the driver's
    rating (or the torque limit when the rating is not stated) and |tau_s| at most the spring
    torque at the deflection limit (beyond it the filter faults anyway); doubled as a margin for
    a progressive spring and model error (common practice for plausibility gates).
    """
    tau_m = limits.driver_torque if math.isfinite(limits.driver_torque) else limits.torque
    return 2.0 * (tau_m + spring_stiffness * limits.deflection) / motor_inertia


class SafetyFilter:
    """Stateful per-joint filter; ``last_torque`` is the last command sent (N m).

    Parameters
    ----------
    limits : Limits
    safe_mode : str
        One of SAFE_MODES.
    period : float
        Nominal control period (s): the slew budget of a first command and the cap after a gap.
    accel_bound : float
        Largest plausible motor acceleration (rad/s^2), :func:`motor_accel_bound`.
    torque_reading : bool
        The law takes the spring torque from the reading: a reading without a finite one is refused.
    """

    def __init__(self, limits: Limits, safe_mode: str = "zero_torque", period: float = 1e-3,
                 accel_bound: float = math.inf, torque_reading: bool = False):
        if safe_mode not in SAFE_MODES:
            raise ValueError(f"safe_mode: must be one of {', '.join(SAFE_MODES)} (got {safe_mode!r})")
        self.limits = limits
        self.safe_mode = safe_mode
        self.period = period
        self.accel_bound = accel_bound
        self.torque_reading = torque_reading
        self.last_torque = 0.0
        self.last_time: float | None = None   # newest stamp time seen (s), monotonic
        self.fault: Fault | None = None
        self.trusted = False                  # the last reading's motor speed may drive motor damping
        self._last_sample: JointSample | None = None  # last reading, for reset
        self._previous: tuple | None = None   # (reading, t) before the last, for plausibility

    def check(self, s: JointSample) -> Fault | None:
        """The fault reading ``s`` causes, or None when it is within limits."""
        lim = self.limits
        if not s.is_finite():
            return Fault(FaultCode.NON_FINITE_READING, "non-finite joint state")
        if self.torque_reading and (s.tau_s is None or not math.isfinite(s.tau_s)):
            return Fault(FaultCode.NON_FINITE_READING, "no finite spring torque in the joint state")
        if abs(s.theta - s.q) > lim.deflection:
            return Fault(FaultCode.DEFLECTION, f"spring deflection {_num(s.theta - s.q)} rad beyond {lim.deflection} rad")
        if not lim.position_lower <= s.q <= lim.position_upper:
            return Fault(FaultCode.POSITION,
                         f"link position {_num(s.q)} rad outside [{lim.position_lower}, {lim.position_upper}] rad")
        if abs(s.dq) > lim.link_speed:
            return Fault(FaultCode.LINK_SPEED, f"link speed {_num(s.dq)} rad/s beyond {lim.link_speed} rad/s")
        if abs(s.dtheta) > lim.motor_speed:
            return Fault(FaultCode.MOTOR_SPEED, f"motor speed {_num(s.dtheta)} rad/s beyond {lim.motor_speed} rad/s")
        return None

    def trip(self, fault: Fault) -> None:
        """Enter safe mode with ``fault`` (the first fault is kept until reset)."""
        if self.fault is None:
            self.fault = fault

    def filter(self, s: JointSample, tau: float | None, t: float) -> float:
        """Command (N m) for reading ``s`` at stamp time ``t`` (s) and the law's torque ``tau``.

        ``tau`` is None when the law gave no output (in fault, or on a bad reading).
        """
        return self.filter_checked(s, self.check(s), tau, t)

    def filter_checked(self, s: JointSample, fault: Fault | None, tau: float | None, t: float) -> float:
        """:meth:`filter` for a caller that has already checked ``s``: ``fault`` is ``self.check(s)``
        under the current limits (a robot checks every joint before it runs its law, once per tick)."""
        if fault is None and tau is not None and not math.isfinite(tau):
            fault = Fault(FaultCode.NON_FINITE_TORQUE, "non-finite torque from the law")
        if fault is not None:
            self.trip(fault)
        self._observe(s, t, fault is None)
        target = tau if self.fault is None and tau is not None else self.safe_target(s)
        return self.limit(target, t)

    def _observe(self, s: JointSample, t: float, within_limits: bool) -> None:
        """Remember ``s`` and decide whether its motor speed can be trusted."""
        kept = (within_limits or s.is_finite()) and math.isfinite(t)  # within limits: checked finite
        previous, self._previous = self._previous, ((s, t) if kept else None)
        self._last_sample = s
        self.trusted = within_limits and previous is not None and self._plausible(previous, s, t)

    def _plausible(self, previous: tuple, s: JointSample, t: float) -> bool:
        """Whether ``s.dtheta`` agrees with the reading before it (taken at most two periods earlier).

        Two checks with a bounded motor acceleration a (``accel_bound``) and the sensor
        tolerance v_tol (``speed_tolerance``): the speed changed by at most a dt + v_tol, and the
        motor's displacement over dt matches the trapezoid of the two speeds within
        a dt / 4 + v_tol in mean speed (the trapezoid rule's error for |theta''| <= a).
        """
        p, t_p = previous
        dt = t - t_p
        if not 0.0 < dt <= MAX_SLEW_WINDOW * self.period:
            return False
        a, tol = self.accel_bound, self.limits.speed_tolerance
        mean = (s.theta - p.theta) / dt
        return (abs(s.dtheta - p.dtheta) <= a * dt + tol
                and abs(mean - 0.5 * (s.dtheta + p.dtheta)) <= 0.25 * a * dt + tol)

    def safe_target(self, s: JointSample | None) -> float:
        """Safe-mode target torque (N m) before saturation and slew limiting.

        ``motor_damping`` brakes the motor, ``-safe_damping * theta'``, only on a motor speed
        that can be trusted: the reading is within every limit (never the reading that caused
        the fault) and plausible against the reading before it. Otherwise, and in
        ``zero_torque``, the target is zero. The target never has the sign of the trusted
        speed, so the motor's power ``tau * theta'`` is never positive: safe mode can only
        brake the motor, never drive it faster.
        """
        if self.safe_mode == "zero_torque" or s is None or not self.trusted:
            return 0.0
        return min(max(-self.limits.safe_damping * s.dtheta, -self.limits.torque), self.limits.torque)

    def window(self, t: float) -> float:
        """Slew window (s) of a command at stamp time ``t``; advances the monotonic time.

        The first command gets one period; a stamp not newer than the newest seen (or not
        finite) gets none; a gap gets at most MAX_SLEW_WINDOW periods.
        """
        if not math.isfinite(t):
            return 0.0
        if self.last_time is None:
            self.last_time = t
            return self.period
        span = min(max(t - self.last_time, 0.0), MAX_SLEW_WINDOW * self.period)
        self.last_time = max(self.last_time, t)
        return span

    def limit(self, tau: float, t: float) -> float:
        """Saturate and slew-limit ``tau`` for a command at stamp time ``t``; remembers the result."""
        lim = self.limits
        if math.isnan(tau):
            tau = 0.0  # an overflowed (infinite) target saturates below
        step = lim.torque_rate * self.window(t)
        tau = min(max(tau, -lim.torque), lim.torque)
        tau = min(max(tau, self.last_torque - step), self.last_torque + step)
        tau = min(max(tau, -lim.torque), lim.torque)  # a lowered limit wins over the slew limit
        self.last_torque = tau
        return tau

    def ramp_down(self, t: float) -> float:
        """Command at ``t`` without a fresh reading: towards zero at the slew limit.

        Motor damping needs a fresh motor speed; a stale one would push, so no reading means zero.
        """
        self.trusted = False
        return self.limit(0.0, t)

    def blocking(self) -> Fault | None:
        """What keeps a reset from clearing the fault: no reading yet, or a last reading beyond a limit."""
        if self._last_sample is None:
            return Fault(FaultCode.NO_READING, "no joint state received yet")
        return self.check(self._last_sample)

    def reset(self) -> Fault | None:
        """Clear the fault if the last reading is within limits; returns the fault that stays, or None."""
        fault = self.blocking()
        if fault is None:
            self.fault = None
        return fault
