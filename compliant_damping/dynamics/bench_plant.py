"""Flexible-joint (series elastic) model, one or several independent joints.

Reduced model of Spong (1987), per joint, in link-side units (gear folded in)::

    M q''     = tau_s - g(q) - d_q q' + tau_ext(t, q, q')
    B theta'' = tau_m - tau_s - d_th theta' - tau_c tanh(theta'/v_c)
    tau_s     = k phi + k3 phi^3 + d_s phi',   phi = theta - q
    g(q)      = m g0 l sin(q + q_off)

``tau_ext`` holds one-sided end stops (a spring-damper contact that only
pushes) and scripted external torques. The driver saturates ``tau_m``.

The state of all joints is an array ``x`` of shape (n, 4) holding
``[q, q', theta, theta']`` per joint (rad, rad/s). Parameters are packed into
an array of shape (n, N_PARAMS) by :func:`pack`, so the integration kernel can
be compiled with numba when it is installed (plain Python otherwise).
"""
from __future__ import annotations

import math
from dataclasses import astuple, dataclass, fields

import numpy as np

from compliant_damping.fields import param

__all__ = ["DriveParams", "JointParams", "LINK_KEYS", "N_PARAMS", "pack", "gravity", "spring_torque", "advance",
           "derivative", "energy", "NO_EXTERNAL"]

try:  # numba is optional: the same function runs as plain Python without it.
    from numba import njit
except ImportError:  # pragma: no cover - exercised only where numba is absent
    def njit(*_args, **_kwargs):
        return lambda fn: fn


@dataclass(frozen=True, kw_only=True)
class DriveParams:
    """One simulated joint's drive: motor, elastic element, friction, end stops and driver (SI units).

    Everything of a joint but its link; a URDF gives the links of a chain
    (dynamics.elastic_chain.ElasticElements takes these per joint).
    """

    motor_inertia: float = param("kg m^2", "positive", "motor inertia B, reflected to the link side")
    spring_stiffness: float = param("N m/rad", "positive", "linear spring stiffness k")
    spring_cubic: float = param("N m/rad^3", "nonnegative", "progressive spring term k3", 0.0)
    spring_damping: float = param("N m s/rad", "nonnegative", "damping of the elastic element d_s", 0.0)
    link_viscous: float = param("N m s/rad", "nonnegative", "link viscous friction d_q", 0.0)
    motor_viscous: float = param("N m s/rad", "nonnegative", "motor viscous friction d_th", 0.0)
    motor_coulomb: float = param("N m", "nonnegative", "motor Coulomb friction tau_c", 0.0)
    coulomb_speed: float = param("rad/s", "positive", "speed below which Coulomb friction is smoothed (tanh)", 0.01)
    stop_lower: float = param("rad", "not_nan", "lower end stop q_min (-inf: none)", -math.inf)
    stop_upper: float = param("rad", "not_nan", "upper end stop q_max (inf: none)", math.inf)
    stop_stiffness: float = param("N m/rad", "nonnegative", "end-stop contact stiffness", 2.0e4)
    stop_damping: float = param("N m s/rad", "nonnegative", "end-stop contact damping", 20.0)
    driver_torque_limit: float = param("N m", "limit", "motor driver saturation (inf: none)", math.inf)

    def __post_init__(self):
        if not self.stop_lower < self.stop_upper:
            raise ValueError(f"stop_lower: must be below stop_upper ({self.stop_upper})")


@dataclass(frozen=True, kw_only=True)
class JointParams(DriveParams):
    """Physical parameters of one simulated series-elastic joint of the built-in bench: its drive
    and a pendulum link (SI units)."""

    link_inertia: float = param("kg m^2", "positive", "link inertia M")
    gravity_torque: float = param("N m", "nonnegative", "pendulum load m g0 l (0: no gravity)", 0.0)
    gravity_offset: float = param("rad", "finite", "pendulum angle offset q_off", 0.0)


LINK_KEYS = tuple(f.name for f in fields(JointParams) if f.name not in {g.name for g in fields(DriveParams)})
N_PARAMS = len(fields(JointParams))
(B, K, K3, DS, DQ, DTH, TC, VC, QMIN, QMAX, KSTOP, DSTOP, TAUMAX, M, MGL, QOFF) = range(N_PARAMS)


def pack(joints) -> np.ndarray:
    """Pack a sequence of :class:`JointParams` into an (n, N_PARAMS) array."""
    return np.array([astuple(j) for j in joints], dtype=float).reshape(-1, N_PARAMS)


def gravity(p, q):
    """Gravity torque g(q) (N m) for one joint's packed parameters ``p``."""
    return p[MGL] * math.sin(q + p[QOFF])


def spring_torque(p, q, dq, th, dth):
    """Torque in the elastic element tau_s (N m), positive when it pulls the link forward."""
    phi = th - q
    return p[K] * phi + p[K3] * phi * phi * phi + p[DS] * (dth - dq)


@njit(cache=True)
def _stop_torque(p, q, dq):
    """One-sided end-stop contact torque on the link (N m): it only pushes out."""
    pen = p[QMIN] - q
    if pen > 0.0:
        return max(p[KSTOP] * pen - p[DSTOP] * dq, 0.0)
    pen = q - p[QMAX]
    if pen > 0.0:
        return min(-p[KSTOP] * pen - p[DSTOP] * dq, 0.0)
    return 0.0


@njit(cache=True)
def _scripted_torque(ext, j, t):
    """Sum of scripted external torques on joint ``j`` active at time ``t`` (N m).

    ``ext`` rows are ``[joint, t_on, t_off, torque]``: torque applied on [t_on, t_off).
    """
    total = 0.0
    for r in range(ext.shape[0]):
        if int(ext[r, 0]) == j and ext[r, 1] <= t < ext[r, 2]:
            total += ext[r, 3]
    return total


@njit(cache=True)
def _accelerations(p, q, dq, th, dth, tau_m, tau_ext):
    phi = th - q
    tau_s = p[K] * phi + p[K3] * phi * phi * phi + p[DS] * (dth - dq)
    g = p[MGL] * math.sin(q + p[QOFF])
    ddq = (tau_s - g - p[DQ] * dq + tau_ext + _stop_torque(p, q, dq)) / p[M]
    friction = p[DTH] * dth + p[TC] * math.tanh(dth / p[VC])
    ddth = (tau_m - tau_s - friction) / p[B]
    return ddq, ddth


@njit(cache=True)
def advance(x, params, tau_m, ext, t0, h, n):
    """Advance all joints ``n`` classical RK4 steps of ``h`` seconds from time ``t0``, in place.

    ``tau_m`` (N m, one per joint) is held constant over the interval and saturated
    at each joint's driver limit. The scripted torques ``ext`` are held over each RK4 step at
    their value at its midpoint, so a pulse whose ends lie on the step grid delivers exactly its
    impulse (sampled at the step's end as well, a pulse ending there lost h/6 of its torque, 1/60
    of a one-period pulse at 10 substeps). Returns the applied (saturated) torques.
    """
    applied = np.empty(x.shape[0])
    for j in range(x.shape[0]):
        p = params[j]
        tau = min(max(tau_m[j], -p[TAUMAX]), p[TAUMAX])
        applied[j] = tau
        q, dq, th, dth = x[j, 0], x[j, 1], x[j, 2], x[j, 3]
        for i in range(n):
            t = t0 + i * h
            e = _scripted_torque(ext, j, t + 0.5 * h)  # held over the step
            a1, b1 = _accelerations(p, q, dq, th, dth, tau, e)
            q2, dq2, th2, dth2 = q + 0.5 * h * dq, dq + 0.5 * h * a1, th + 0.5 * h * dth, dth + 0.5 * h * b1
            a2, b2 = _accelerations(p, q2, dq2, th2, dth2, tau, e)
            q3, dq3, th3, dth3 = q + 0.5 * h * dq2, dq + 0.5 * h * a2, th + 0.5 * h * dth2, dth + 0.5 * h * b2
            a3, b3 = _accelerations(p, q3, dq3, th3, dth3, tau, e)
            q4, dq4, th4, dth4 = q + h * dq3, dq + h * a3, th + h * dth3, dth + h * b3
            a4, b4 = _accelerations(p, q4, dq4, th4, dth4, tau, e)
            q += h / 6.0 * (dq + 2.0 * dq2 + 2.0 * dq3 + dq4)
            dq += h / 6.0 * (a1 + 2.0 * a2 + 2.0 * a3 + a4)
            th += h / 6.0 * (dth + 2.0 * dth2 + 2.0 * dth3 + dth4)
            dth += h / 6.0 * (b1 + 2.0 * b2 + 2.0 * b3 + b4)
        x[j, 0], x[j, 1], x[j, 2], x[j, 3] = q, dq, th, dth
    return applied


def derivative(params, x, tau_m, ext, t):
    """Time derivative of the (n, 4) state (for reference integrators such as solve_ivp)."""
    out = np.empty_like(x)
    for j in range(x.shape[0]):
        p = params[j]
        tau = min(max(tau_m[j], -p[TAUMAX]), p[TAUMAX])
        ddq, ddth = _accelerations(p, *x[j], tau, _scripted_torque(ext, j, t))
        out[j] = (x[j, 1], ddq, x[j, 3], ddth)
    return out


def energy(params, x):
    """Stored energy per joint (J): kinetic, spring, gravity and end-stop contact."""
    out = np.empty(x.shape[0])
    for j in range(x.shape[0]):
        p, (q, dq, th, dth) = params[j], x[j]
        phi = th - q
        pen = max(p[QMIN] - q, q - p[QMAX], 0.0)
        out[j] = (0.5 * p[M] * dq**2 + 0.5 * p[B] * dth**2 + 0.5 * p[K] * phi**2
                  + 0.25 * p[K3] * phi**4 + p[MGL] * (1.0 - math.cos(q + p[QOFF]))
                  + 0.5 * p[KSTOP] * pen**2)
    return out


NO_EXTERNAL = np.zeros((0, 4))
