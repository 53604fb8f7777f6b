"""Linear analysis of one joint's closed loop around its set-point equilibrium (no ROS).

The closed loop is the plant of :mod:`model` driven by a law of :mod:`laws`,
with state ``[q, q', theta, theta', z...]`` (rad, rad/s; ``z`` the law's own
states). Nothing is re-derived here: :func:`linearize` differentiates the
running code (``bench_plant.derivative`` with the law's ``output`` and
``state_rate``) by central differences, so the poles reported are those of the
implementation, including any mistake in it.

Coulomb friction is smoothed with ``tanh(theta'/v_c)`` in the plant; its slope
at rest, ``tau_c / v_c``, would enter the linear model as a large motor-side
viscous term that the real (non-smooth) friction does not provide for motion.
It is therefore switched off for the linearisation unless ``coulomb=True``.
End stops and the driver's saturation are inactive at an equilibrium between
the stops.

Definitions used throughout: a *mode* is a real pole or a conjugate pair, with
natural frequency ``|p|`` and damping ratio ``-Re(p)/|p|``; the *dominant* mode
decays slowest (smallest ``-Re(p)``) and sets the settling time, about
``4 / (zeta w_n)`` to 2 % (common practice); the *least-damped* mode has the
smallest damping ratio and sets the ringing. The static link stiffness is the
inverse DC gain from a constant external link torque to the link position.

Public API: :func:`linearize`, :func:`analyze`, :func:`link_admittance`,
:func:`static_link_stiffness`, :func:`modes_of`, and the result classes :class:`LinearModel`, :class:`Mode`,
:class:`Analysis`.
"""
from __future__ import annotations

import dataclasses
import math
from dataclasses import dataclass

import numpy as np
from scipy import optimize

from compliant_damping.control.laws import Law
from compliant_damping.control.sample import JointSample, Reference
from compliant_damping.dynamics import bench_plant
from compliant_damping.dynamics.bench_plant import JointParams

__all__ = ["AnalysisError", "LinearModel", "Mode", "Analysis", "linearize", "analyze",
           "link_admittance", "static_link_stiffness", "modes_of", "central_jacobian"]


class AnalysisError(ValueError):
    """The closed loop has no equilibrium near the set point, or an argument is unusable."""


@dataclass(frozen=True)
class LinearModel:
    """x' = a x + b tau_ext, q = c x, around ``equilibrium`` (deviation coordinates).

    Attributes
    ----------
    a : ndarray, shape (n, n)
        State matrix (1/s and 1/s^2 entries) for states ``state_names``.
    b : ndarray, shape (n,)
        Input vector of a constant external torque on the link (per N m).
    c : ndarray, shape (n,)
        Output row selecting the link position q (rad).
    equilibrium : ndarray, shape (n,)
        Closed-loop equilibrium ``[q, q', theta, theta', z...]`` the model is taken at.
    state_names : tuple of str
    """

    a: np.ndarray
    b: np.ndarray
    c: np.ndarray
    equilibrium: np.ndarray
    state_names: tuple


@dataclass(frozen=True)
class Mode:
    """One mode: a complex-conjugate pole pair (upper member kept) or a real pole.

    Attributes
    ----------
    pole : complex
        Pole (rad/s); ``pole.imag >= 0``.
    natural_frequency : float
        ``|pole|`` (rad/s).
    damping_ratio : float
        ``-Re(pole) / |pole|``: 1 for a stable real pole, negative when unstable.
    link_share : float
        Share of the link position in the mode's shape, ``|v_q| / ||(v_q, v_theta, v_x)||``
        over its eigenvector's position entries (x: the damper's position, when the law has one), 0..1.
    """

    pole: complex
    natural_frequency: float
    damping_ratio: float
    link_share: float

    @property
    def frequency_hz(self) -> float:
        """Natural frequency (Hz)."""
        return self.natural_frequency / (2.0 * math.pi)

    @property
    def decay_rate(self) -> float:
        """``-Re(pole)`` = damping_ratio * natural_frequency (1/s); 4 / decay_rate is the 2 % settling estimate."""
        return -self.pole.real


@dataclass(frozen=True)
class Analysis:
    """Result of :func:`analyze`.

    Attributes
    ----------
    law : str
    poles : ndarray of complex
        All closed-loop poles (rad/s), sorted by magnitude.
    modes : tuple of Mode
        One entry per real pole or conjugate pair, sorted by natural frequency.
    dominant : Mode
        The slowest-decaying mode (smallest ``-Re(pole)``): it sets the settling time,
        about ``4 / dominant.decay_rate`` to 2 % (common practice).
    least_damped : Mode
        The mode with the smallest damping ratio: it sets the ringing. With a damping law
        this is the link resonance the damper has to tame (see its ``link_share``).
    static_link_stiffness : float
        ``1 / G(0)`` of the external-link-torque-to-link-position transfer G (N m/rad);
        0 when the link can drift (singular state matrix).
    linear : LinearModel
    """

    law: str
    poles: np.ndarray
    modes: tuple
    dominant: Mode
    least_damped: Mode
    static_link_stiffness: float
    linear: LinearModel

    @property
    def stable(self) -> bool:
        """True when every pole has a negative real part."""
        return bool(np.all(self.poles.real < 0.0))


def _rate_function(plant: JointParams, law: Law, q_d: float, coulomb: bool):
    """f(x, tau_ext) -> x' of the closed loop at the constant set point ``q_d``."""
    if not coulomb:
        plant = dataclasses.replace(plant, motor_coulomb=0.0)
    params = bench_plant.pack([plant])
    ref = Reference(q_d)

    def f(x, tau_ext=0.0):
        s = JointSample(*(float(v) for v in x[:4]))
        z = tuple(float(v) for v in x[4:])
        tau = law.output(s, ref, z)
        ext = np.array([[0.0, -math.inf, math.inf, tau_ext]])
        plant_rate = bench_plant.derivative(params, np.asarray(x[:4], dtype=float).reshape(1, 4),
                                            np.array([tau]), ext, 0.0)[0]
        return np.concatenate([plant_rate, np.asarray(law.state_rate(s, ref, z), dtype=float)])

    return f


def _equilibrium(f, plant: JointParams, law: Law, q_d: float) -> np.ndarray:
    """Rest state of the closed loop near the set point (solved, so a wrong nominal model shows)."""
    theta = q_d + plant.gravity_torque * math.sin(q_d + plant.gravity_offset) / plant.spring_stiffness
    guess = np.array([q_d, 0.0, theta, 0.0, *law.initial_state(JointSample(q_d, 0.0, theta, 0.0))])
    sol = optimize.root(f, guess, method="hybr", tol=1e-13)
    if not np.max(np.abs(f(sol.x))) <= 1e-8:  # judged by the residual: "no progress" at 1e-14 is fine
        raise AnalysisError(f"no closed-loop equilibrium found near q_d = {q_d} rad ({sol.message})")
    return sol.x


def linearize(plant: JointParams, law: Law, q_d: float = 0.0, *, coulomb: bool = False,
              rel_step: float = 1e-6) -> LinearModel:
    """Linear model of the closed loop (plant + law) at the equilibrium for set point ``q_d``.

    Parameters
    ----------
    plant : bench_plant.JointParams
        The simulated joint (its parameters may differ from the law's nominal model).
    law : laws.Law
        The law, built with its nominal model and gains (``laws.make_law``).
    q_d : float
        Constant link set point (rad).
    coulomb : bool
        Keep the smoothed Coulomb friction's slope at rest (see the module notes).
    rel_step : float
        Central-difference step relative to ``max(1, |x_i|)``.

    Returns
    -------
    LinearModel

    Notes
    -----
    Jacobians by central differences, ``(f(x + h e_i) - f(x - h e_i)) / 2h``, of the
    implemented laws and plant; exact for the affine parts, O(h^2) elsewhere.
    """
    if not (math.isfinite(q_d) and plant.stop_lower < q_d < plant.stop_upper):
        raise AnalysisError(f"q_d: {q_d} rad must lie between the end stops")
    f = _rate_function(plant, law, q_d, coulomb)
    x0 = _equilibrium(f, plant, law, q_d)
    n = len(x0)
    a = central_jacobian(f, x0, rel_step)
    h = rel_step
    b = (f(x0, h) - f(x0, -h)) / (2.0 * h)
    c = np.zeros(n)
    c[0] = 1.0
    names = ("q", "dq", "theta", "dtheta") + tuple(f"z{i}" for i in range(n - 4))
    return LinearModel(a, b, c, x0, names)


def central_jacobian(f, x0: np.ndarray, rel_step: float = 1e-6) -> np.ndarray:
    """df/dx at ``x0`` by central differences, step ``rel_step * max(1, |x_i|)`` per state."""
    n = len(x0)
    a = np.empty((n, n))
    for i in range(n):
        h = rel_step * max(1.0, abs(x0[i]))
        dx = np.zeros(n)
        dx[i] = h
        a[:, i] = (f(x0 + dx) - f(x0 - dx)) / (2.0 * h)
    return a


def modes_of(lin: LinearModel, tol: float = 1e-9) -> tuple:
    """Modes of ``lin`` (one per real pole or conjugate pair), sorted by natural frequency."""
    poles, vecs = np.linalg.eig(lin.a)
    position_rows = [i for i, nm in enumerate(lin.state_names) if nm in ("q", "theta", "z0")]  # z0: damper x
    modes = []
    for p, v in zip(poles, vecs.T):
        if p.imag < -tol * max(1.0, abs(p)):
            continue  # the pair's upper member stands for both
        wn = abs(p)
        zeta = -p.real / wn if wn > 0.0 else 1.0
        pos = np.abs(v[position_rows])
        share = float(pos[0] / np.linalg.norm(pos)) if np.linalg.norm(pos) > 0.0 else 0.0
        modes.append(Mode(complex(p.real, abs(p.imag)), float(wn), float(zeta), share))
    return tuple(sorted(modes, key=lambda m: m.natural_frequency))


def link_admittance(lin: LinearModel, frequency_hz) -> np.ndarray:
    """Complex link admittance q / tau_ext (rad/N m) at ``frequency_hz`` (Hz, array-like).

    Its inverse is the rendered link impedance (N m/rad); at 0 Hz it is the static compliance.
    """
    w = 2.0 * math.pi * np.atleast_1d(np.asarray(frequency_hz, dtype=float))
    pencil = 1j * w[:, None, None] * np.eye(len(lin.b)) - lin.a  # (F, n, n): one solve per frequency
    return np.linalg.solve(pencil, np.broadcast_to(lin.b, (len(w), len(lin.b)))[..., None])[..., 0] @ lin.c


def static_link_stiffness(lin: LinearModel) -> float:
    """1 / G(0) of the link admittance G (N m/rad), 0 when a is singular (the link can drift)."""
    if np.linalg.matrix_rank(lin.a) < lin.a.shape[0]:
        return 0.0
    return float(1.0 / (lin.c @ np.linalg.solve(-lin.a, lin.b)))


def analyze(plant: JointParams, law: Law, q_d: float = 0.0, *, coulomb: bool = False) -> Analysis:
    """Poles, modes, dominant and least-damped modes and static link stiffness of plant + law at ``q_d`` (rad).

    See :func:`linearize` for the parameters. Raises :class:`AnalysisError` when no
    equilibrium exists near the set point.
    """
    lin = linearize(plant, law, q_d, coulomb=coulomb)
    poles = np.linalg.eigvals(lin.a)
    poles = poles[np.argsort(np.abs(poles), kind="stable")]
    modes = modes_of(lin)
    dominant = min(modes, key=lambda m: m.decay_rate)
    least_damped = min(modes, key=lambda m: m.damping_ratio)
    return Analysis(law.name, poles, modes, dominant, least_damped, static_link_stiffness(lin), lin)
