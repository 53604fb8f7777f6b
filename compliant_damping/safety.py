"""Safety filter for one joint: always on, after every law, before the motor.

Per tick it checks the measurement and the law's torque, then limits the
command (design notes, section 5):

* a non-finite reading or torque, a spring deflection, link position, link or
  motor speed beyond its limit: fault, with a reason;
* no joint state for longer than the watchdog timeout: fault ("watchdog");
* in fault (safe mode) the target torque is zero (``zero_torque``) or motor-side
  damping ``-safe_damping * theta'`` (``motor_damping``), itself saturated;
* always ``|tau| <= torque`` and ``|tau - tau_prev| <= torque_rate * dt``.

A fault latches: only :meth:`SafetyFilter.reset` clears it, and only while the
last reading is within limits.
"""
from __future__ import annotations

import math
from dataclasses import dataclass

from .fields import param
from .sample import JointSample

SAFE_MODES = ("zero_torque", "motor_damping")


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

    def __post_init__(self):
        if not self.position_lower < self.position_upper:
            raise ValueError(f"position_lower: must be below position_upper ({self.position_upper})")
        if self.torque > self.driver_torque:
            raise ValueError(f"torque: {self.torque} N m is above the driver's {self.driver_torque} N m")


class SafetyFilter:
    """Stateful per-joint filter; ``last_torque`` is the last command sent (N m)."""

    def __init__(self, limits: Limits, safe_mode: str = "zero_torque"):
        if safe_mode not in SAFE_MODES:
            raise ValueError(f"safe_mode: must be one of {', '.join(SAFE_MODES)} (got {safe_mode!r})")
        self.limits = limits
        self.safe_mode = safe_mode
        self.last_torque = 0.0
        self.fault: str | None = None
        self._last_sample: JointSample | None = None  # last reading, for reset

    def violation(self, s: JointSample) -> str | None:
        """Reason why ``s`` is unsafe, or None."""
        lim = self.limits
        if not s.is_finite():
            return "non-finite joint state"
        if abs(s.theta - s.q) > lim.deflection:
            return f"spring deflection {s.theta - s.q:+.4f} rad beyond {lim.deflection} rad"
        if not lim.position_lower <= s.q <= lim.position_upper:
            return f"link position {s.q:+.4f} rad outside [{lim.position_lower}, {lim.position_upper}] rad"
        if abs(s.dq) > lim.link_speed:
            return f"link speed {s.dq:+.3f} rad/s beyond {lim.link_speed} rad/s"
        if abs(s.dtheta) > lim.motor_speed:
            return f"motor speed {s.dtheta:+.3f} rad/s beyond {lim.motor_speed} rad/s"
        return None

    def trip(self, reason: str) -> None:
        """Enter safe mode with ``reason`` (the first reason is kept until reset)."""
        if self.fault is None:
            self.fault = reason

    def filter(self, s: JointSample, tau: float, dt: float) -> float:
        """Command for this tick (N m) from reading ``s`` and the law's torque ``tau``."""
        reason = self.violation(s)
        if reason is None and not math.isfinite(tau):
            reason = "non-finite torque from the law"
        if reason is not None:
            self.trip(reason)
        self._last_sample = s
        return self.limit(tau if self.fault is None else self.safe_torque(s), dt)

    def safe_torque(self, s: JointSample | None) -> float:
        """Safe-mode target torque (N m) before saturation and slew limiting."""
        if self.safe_mode == "zero_torque" or s is None or not math.isfinite(s.dtheta):
            return 0.0
        return -self.limits.safe_damping * s.dtheta

    def limit(self, tau: float, dt: float) -> float:
        """Saturate and slew-limit ``tau`` against the last command; remembers the result."""
        lim = self.limits
        if math.isnan(tau):
            tau = 0.0  # an overflowed (infinite) target saturates below
        step = lim.torque_rate * max(dt, 0.0) if math.isfinite(dt) else 0.0
        tau = min(max(tau, -lim.torque), lim.torque)
        tau = min(max(tau, self.last_torque - step), self.last_torque + step)
        tau = min(max(tau, -lim.torque), lim.torque)  # a lowered limit wins over the slew limit
        self.last_torque = tau
        return tau

    def ramp_down(self, dt: float) -> float:
        """Command for a tick without a fresh reading: towards zero at the slew limit.

        Motor damping needs a fresh motor speed; a stale one would push, so no reading means zero.
        """
        return self.limit(0.0, dt)

    def reset(self) -> str | None:
        """Clear the fault if the last reading is within limits; returns the reason it stays, or None."""
        if self._last_sample is None:
            return "no joint state received yet"
        reason = self.violation(self._last_sample)
        if reason is None:
            self.fault = None
        return reason
