"""Rendered link impedance of the linearised closed loop (no ROS).

The admittance ``Y(jw) = q / tau_ext`` (rad/N m) is the transfer from an external link torque to the
link position of a linear model of analysis/linear.py (one joint) or, per joint, the diagonal of a
robot's admittance matrix (analysis/robot_linear.py); the rendered impedance is ``Z = 1 / Y``
(N m/rad). At 0 Hz ``Z`` is the static link stiffness.

Passivity (energy the loop can give back through the link port): the port's power variables are torque
and velocity, so the test is on the *velocity* admittance ``Y_v(jw) = jw Y(jw)`` (rad/(N m s)). A
stable linear one-port is passive iff ``Re Y_v(jw) >= 0`` at every frequency (positive-real condition,
textbook result for linear networks). Here it is checked over a finite range with a tolerance relative
to ``|Y_v|`` (rounding: a lossless spring-mass port has ``Re Y_v`` of order 1e-16 |Y_v|); the worst
frequency, where ``Re Y_v`` is most negative (smallest, if none is negative), is refined between grid
points.

The continuous model does not hold the torque over a control period: the zero-order hold adds a lag of
about ``w T / 2``, 90 degrees at half the control rate. The default range therefore ends at half the
control rate (the highest frequency the sampled controller can act on, Nyquist) and starts at 0.1 Hz, a
decade or more below the bench joint's slowest mode, where the static plateau shows.

Public API: :func:`frequency_grid`, :func:`rendered_impedance`, :func:`robot_impedance`, and the result
classes :class:`Passivity`, :class:`RenderedImpedance`.
"""
from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np
from scipy import optimize

from compliant_damping.analysis.linear import AnalysisError, LinearModel, link_admittance, static_link_stiffness

__all__ = ["Passivity", "RenderedImpedance", "frequency_grid", "rendered_impedance", "robot_impedance",
           "LOWEST_FREQUENCY_HZ", "PASSIVITY_TOLERANCE"]

LOWEST_FREQUENCY_HZ = 0.1
PASSIVITY_TOLERANCE = 1e-9  # relative to |Y_v|


@dataclass(frozen=True)
class Passivity:
    """Passivity check of the velocity admittance ``Y_v = jw q/tau_ext`` over a frequency range.

    Attributes
    ----------
    passive : bool
        ``Re Y_v >= -tolerance * |Y_v|`` at every frequency of the grid and at the refined worst one.
    worst_frequency_hz : float
        Frequency (Hz) where ``Re Y_v`` is smallest (most negative when the loop is not passive).
    worst_real_part : float
        ``Re Y_v`` there (rad/(N m s)).
    tolerance : float
        Relative tolerance on ``|Y_v|`` used for the verdict.
    """

    passive: bool
    worst_frequency_hz: float
    worst_real_part: float
    tolerance: float


@dataclass(frozen=True)
class RenderedImpedance:
    """Link admittance and impedance of a linearised closed loop over frequency.

    Attributes
    ----------
    frequency_hz : ndarray, shape (F,)
        Frequencies (Hz), increasing.
    admittance : ndarray of complex, shape (F,)
        ``Y = q / tau_ext`` (rad/N m).
    static_stiffness : float
        ``1 / Y(0)`` (N m/rad); 0 when the link can drift (singular state matrix).
    passivity : Passivity
    """

    frequency_hz: np.ndarray
    admittance: np.ndarray
    static_stiffness: float
    passivity: Passivity

    @property
    def magnitude(self) -> np.ndarray:
        """``|Z| = 1 / |Y|`` (N m/rad)."""
        return 1.0 / np.abs(self.admittance)

    @property
    def phase_deg(self) -> np.ndarray:
        """Phase of ``Z`` (deg), unwrapped along the grid from its value in (-180, 180] at the lowest frequency."""
        return np.degrees(np.unwrap(np.angle(1.0 / self.admittance)))

    @property
    def velocity_admittance(self) -> np.ndarray:
        """``Y_v = jw Y`` (rad/(N m s))."""
        return 2j * math.pi * self.frequency_hz * self.admittance


def frequency_grid(control_rate_hz: float, points: int = 400, lowest_hz: float = LOWEST_FREQUENCY_HZ) -> np.ndarray:
    """``points`` log-spaced frequencies (Hz) from ``lowest_hz`` to half the control rate (see the module notes).

    Raises
    ------
    AnalysisError
        When the range is empty or fewer than two points are asked for.
    """
    top = 0.5 * control_rate_hz
    if not (points >= 2 and 0.0 < lowest_hz < top):
        raise AnalysisError(f"frequency range: need 0 < {lowest_hz} Hz < half the control rate {top} Hz "
                            f"and at least 2 points (got {points})")
    return np.geomspace(lowest_hz, top, points)


def _real_velocity_admittance(lin: LinearModel, frequency_hz) -> np.ndarray:
    f = np.atleast_1d(np.asarray(frequency_hz, dtype=float))
    return (2j * math.pi * f * link_admittance(lin, f)).real


def _passivity(lin: LinearModel, frequency_hz: np.ndarray, y_v: np.ndarray, tolerance: float) -> Passivity:
    """Verdict on the grid; the worst grid point refined (bounded scalar search in log f) between its neighbours."""
    i = int(np.argmin(y_v.real))
    lo, hi = frequency_hz[max(i - 1, 0)], frequency_hz[min(i + 1, len(frequency_hz) - 1)]
    refined = optimize.minimize_scalar(lambda u: _real_velocity_admittance(lin, math.exp(u))[0],
                                       bounds=(math.log(lo), math.log(hi)), method="bounded",
                                       options={"xatol": 1e-10})
    worst_f, worst_re = frequency_hz[i], float(y_v[i].real)
    if refined.fun < worst_re:
        worst_f, worst_re = math.exp(refined.x), float(refined.fun)
    worst_abs = abs(2j * math.pi * worst_f * link_admittance(lin, worst_f)[0])
    passive = bool(np.all(y_v.real >= -tolerance * np.abs(y_v)) and worst_re >= -tolerance * worst_abs)
    return Passivity(passive, float(worst_f), worst_re, tolerance)


def rendered_impedance(lin: LinearModel, frequency_hz, tolerance: float = PASSIVITY_TOLERANCE) -> RenderedImpedance:
    """Link admittance, impedance, static stiffness and passivity of one joint's linear closed loop.

    Parameters
    ----------
    lin : linear.LinearModel
        Linearised closed loop (``b``: external link torque input, ``c``: link position output).
    frequency_hz : array-like
        Increasing positive frequencies (Hz), e.g. :func:`frequency_grid`.
    tolerance : float
        Relative tolerance of the passivity verdict (on ``|Y_v|``).

    Returns
    -------
    RenderedImpedance
    """
    f = np.asarray(frequency_hz, dtype=float)
    if f.ndim != 1 or len(f) < 2 or not (f[0] > 0.0 and np.all(np.diff(f) > 0.0)):
        raise AnalysisError("frequency_hz: need at least two increasing positive frequencies (Hz)")
    y = link_admittance(lin, f)
    passivity = _passivity(lin, f, 2j * math.pi * f * y, tolerance)
    return RenderedImpedance(f, y, static_link_stiffness(lin), passivity)


def robot_impedance(lin, frequency_hz, tolerance: float = PASSIVITY_TOLERANCE) -> tuple:
    """Per joint j, the rendered impedance of the diagonal entry ``q_j / tau_ext,j`` of a robot's admittance matrix.

    ``lin`` is a robot_linear.RobotLinearModel. Each entry sees the other joints move freely under the loop,
    so its static value ``1 / Y_jj(0)`` is the inverse of the compliance matrix's diagonal, not the diagonal
    of robot_linear.rendered_link_stiffness. Returns one :class:`RenderedImpedance` per joint.
    """
    size = lin.a.shape[0]
    names = tuple(f"x{i}" for i in range(size))
    return tuple(rendered_impedance(LinearModel(lin.a, lin.b[:, j], np.eye(size)[j], lin.equilibrium, names),
                                    frequency_hz, tolerance) for j in range(lin.joints))
