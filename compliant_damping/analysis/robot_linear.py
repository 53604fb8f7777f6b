"""Linear analysis of a robot's closed loop on coupled links, around its set-point equilibrium.

The closed loop is dynamics.elastic_chain.ElasticChain driven by a law of control/laws.py on a
laws.ChainNominal, state ``[q, q', theta, theta'] per joint + the law's states`` (rad, rad/s).
As in analysis/linear.py nothing is re-derived: :func:`linearize_robot` differentiates the running
code (the plant's ``rates`` with the law's ``output`` and ``state_rate``) by central differences
at the equilibrium it solves for, so the poles are those of the implementation. Coulomb friction
is switched off for the linearisation (analysis/linear.py explains why); end stops and contacts are
inactive at an equilibrium between them.

A mode is a real pole or a conjugate pair with natural frequency |p| and damping ratio
-Re(p)/|p| (analysis/linear.py's definitions); its joint shares say how much of its link motion each
joint carries.
"""
from __future__ import annotations

import dataclasses
from dataclasses import dataclass

import numpy as np
from scipy import optimize

from compliant_damping.analysis.linear import AnalysisError, central_jacobian
from compliant_damping.control.sample import JointSample, Reference

__all__ = ["RobotLinearModel", "RobotMode", "linearize_robot", "rendered_link_stiffness", "robot_modes"]


@dataclass(frozen=True)
class RobotLinearModel:
    """x' = a x + b tau_ext around ``equilibrium``; x = (q, q', theta, theta', z) stacked by quantity.

    Attributes
    ----------
    a : ndarray, shape (N, N)
    b : ndarray, shape (N, n)
        Input matrix of constant external link torques (per N m, one column per joint).
    equilibrium : ndarray, shape (N,)
    joints : int
        Number of joints n; q occupies rows 0..n-1, theta rows 2n..3n-1.
    """

    a: np.ndarray
    b: np.ndarray
    equilibrium: np.ndarray
    joints: int


@dataclass(frozen=True)
class RobotMode:
    """One mode: pole (rad/s, upper member of a pair), natural frequency, damping ratio, joint shares."""

    pole: complex
    natural_frequency: float
    damping_ratio: float
    joint_shares: np.ndarray  # |v_q,j| / ||v_q|| per joint (0..1, squares sum to 1)

    @property
    def frequency_hz(self) -> float:
        return self.natural_frequency / (2.0 * np.pi)


def _rate_function(plant, law, q_d: np.ndarray, coulomb: bool):
    if not coulomb:
        plant = type(plant)(plant.links, dataclasses.replace(plant.e, motor_coulomb=0.0 * plant.e.motor_coulomb),
                            plant.contacts)
    n = plant.n
    ref = Reference(q_d, np.zeros(n), np.zeros(n))

    def f(x, tau_ext=None):
        state = x[:4 * n].reshape(4, n).T
        z = tuple(x[4 * n:].reshape(-1, n)) if law.n_states else ()
        s = JointSample(state[:, 0], state[:, 1], state[:, 2], state[:, 3])
        tau = law.output(s, ref, z)
        rates = plant.rates(state, tau, np.zeros(n) if tau_ext is None else tau_ext)
        dz = np.concatenate(law.state_rate(s, ref, z)) if law.n_states else np.zeros(0)
        return np.concatenate([rates.T.ravel(), dz])
    return f, plant


def linearize_robot(plant, law, q_d, *, coulomb: bool = False, rel_step: float = 1e-6) -> RobotLinearModel:
    """Linear model of the robot's closed loop at the equilibrium for the constant set point ``q_d`` (rad)."""
    q_d = np.asarray(q_d, dtype=float)
    f, plant = _rate_function(plant, law, q_d, coulomb)
    n = plant.n
    theta = q_d + plant.links.gravity(q_d) / plant.e.spring_stiffness
    z0 = law.initial_state(JointSample(q_d, np.zeros(n), theta, np.zeros(n)))
    guess = np.concatenate([q_d, np.zeros(n), theta, np.zeros(n)] + [np.asarray(v) for v in z0])
    sol = optimize.root(f, guess, method="hybr", tol=1e-13)
    if not np.max(np.abs(f(sol.x))) <= 1e-8:
        raise AnalysisError(f"no closed-loop equilibrium found near q_d = {q_d} rad ({sol.message})")
    x0 = sol.x
    size = len(x0)
    a = central_jacobian(f, x0, rel_step)
    b = np.empty((size, n))
    for j in range(n):
        e = np.zeros(n)
        e[j] = rel_step
        b[:, j] = (f(x0, e) - f(x0, -e)) / (2.0 * rel_step)
    return RobotLinearModel(a, b, x0, n)


def robot_modes(lin: RobotLinearModel, tol: float = 1e-9) -> tuple:
    """Modes of ``lin`` (one per real pole or conjugate pair), sorted by natural frequency."""
    n = lin.joints
    poles, vecs = np.linalg.eig(lin.a)
    modes = []
    for p, v in zip(poles, vecs.T):
        if p.imag < -tol * max(1.0, abs(p)):
            continue
        wn = abs(p)
        link = np.abs(v[:n])
        norm = np.linalg.norm(link)
        modes.append(RobotMode(complex(p.real, abs(p.imag)), float(wn), float(-p.real / wn) if wn > 0 else 1.0,
                               link / norm if norm > 0 else np.zeros(n)))
    return tuple(sorted(modes, key=lambda m: m.natural_frequency))


def rendered_link_stiffness(lin: RobotLinearModel) -> np.ndarray:
    """Static link stiffness matrix the closed loop renders at its equilibrium (N m/rad), (n, n).

    A constant external link torque ``u`` moves the equilibrium by ``dx = -a^-1 b u``; its link
    part is ``dq = -C a^-1 b u`` (C picks q), so the stiffness is ``K_r = -(C a^-1 b)^-1``: the
    matrix analogue of analysis/linear.py's static link stiffness ``1 / G(0)``. Raises AnalysisError when
    ``a`` is singular (a link that drifts has no static stiffness).
    """
    n = lin.joints
    try:
        compliance = -np.linalg.solve(lin.a, lin.b)[:n]
        return np.linalg.inv(compliance)
    except np.linalg.LinAlgError as err:
        raise AnalysisError(f"no static link stiffness: the linearised loop is singular ({err})") from None
