"""Control laws for one series-elastic joint: motor torque before the safety filter.

Every law is written in continuous time as an output map and, for laws with
internal states ``z``, a state rate::

    tau_m = law.output(sample, ref, z)        z' = law.state_rate(sample, ref, z)

``LawRunner`` discretises the states exactly (zero-order hold on the measured
link position) and is what the controller ticks. ``analysis`` linearises the
same two functions, so the poles it reports are those of this code.

Laws (see DEVELOPERS.md for the derivations):

``zero``
    tau_m = 0.
``motor_pd``
    Collocated PD with constant gravity compensation (Tomei 1991):
    theta_d = q_d + g(q_d)/k,  tau_m = K (theta_d - theta) - D (theta' - theta_d') + g(q_d).
``link_damping``, ``decoupled_damper``, ``decoupled_impedance``
    Structure-preserving transformation: pick a link-side input u1, define
    eta = theta - u1/k and command tau_m = u2 + u1 + (B/k) u1''. The closed loop
    keeps the joint's shape, M q'' = k (eta - q) + u1 - g(q), B eta'' = k (q - eta) + u2,
    with u2 = g(q_d) - K (eta - eta_d) - D (eta' - eta_d'), eta_d = q_d + g(q_d)/k.
    Derivatives of u1 use the model-based link acceleration and jerk
    q''_m = (k (theta - q) - g(q))/M,  q'''_m = (k (theta' - q') - g'(q) q')/M
    (with a torque sensor, spring_torque_source: effort, q''_m = (tau_s - g(q))/M).

    * link_damping: u1 = -D_l q' (needs the link jerk: the reference design).
    * decoupled_damper: the damper sits behind a virtual spring k_v,
      m_v x'' + D_v x' = k_v (q - x), u1 = -k_v (q - x) (m_v = 0: first order).
      Only the link acceleration enters the torque.
    * decoupled_impedance: u1 = -K_l (q - q_d) - k_v (q - x), the damper as above.

    Motor inertia shaping (``motor_inertia_target`` B_d > 0) replaces u2 by
    (B/B_d) u2 + (1 - B/B_d) k (eta - q), so that B_d eta'' = k (q - eta) + u2.
"""
from __future__ import annotations

import math
from dataclasses import dataclass, field
from typing import NamedTuple

import numpy as np

from compliant_damping.control.sample import JointSample
from compliant_damping.dynamics.links import LinkMotion
from compliant_damping.fields import param

__all__ = ["LAW_NAMES", "RegulationTarget", "regulation_target", "NominalDrive", "NominalModel", "ChainNominal",
           "Gains", "Law", "MotorPD", "LinkDamping", "DecoupledDamper", "DecoupledImpedance", "check_gains",
           "make_law"]

LAW_NAMES = ("zero", "motor_pd", "link_damping", "decoupled_damper", "decoupled_impedance")


class RegulationTarget(NamedTuple):
    """What a reference asks of the motor side: gravity feed-forward and the motor set point.

    Attributes (floats for a bench joint, one entry per joint on a chain)
    ----------
    gravity :
        g(q_d) (N m).
    position :
        eta_d = q_d + K^-1 g(q_d) (rad): motor_pd's theta_d, the transformed laws' eta_d.
    speed :
        eta_d' = q_d' + K^-1 (dg/dq) q_d' (rad/s).
    """

    gravity: float
    position: float
    speed: float


def regulation_target(model, q_d, dq_d) -> RegulationTarget:
    """:class:`RegulationTarget` of the reference position ``q_d`` (rad) and speed ``dq_d`` (rad/s)."""
    k = model.spring_stiffness
    g_d = model.gravity(q_d)
    return RegulationTarget(g_d, q_d + g_d / k, dq_d + model.gravity_rate(q_d, dq_d) / k)


@dataclass(frozen=True, kw_only=True)
class NominalDrive:
    """The controller's model of one joint's drive: motor inertia and spring (a URDF gives the links)."""

    motor_inertia: float = param("kg m^2", "positive", "nominal motor inertia B (link side)", 1.0, required=True)
    spring_stiffness: float = param("N m/rad", "positive", "nominal spring stiffness k", 100.0, required=True)


@dataclass(frozen=True, kw_only=True)
class NominalModel(NominalDrive):
    """The controller's own model of a bench joint, drive and pendulum link (need not equal the plant)."""

    link_inertia: float = param("kg m^2", "positive", "nominal link inertia M", 1.0, required=True)
    gravity_torque: float = param("N m", "nonnegative", "nominal pendulum load m g0 l", 0.0)
    gravity_offset: float = param("rad", "finite", "nominal pendulum offset q_off", 0.0)

    def gravity(self, q: float) -> float:
        """g(q) (N m)."""
        return self.gravity_torque * math.sin(q + self.gravity_offset)

    def gravity_slope(self, q: float) -> float:
        """dg/dq (N m/rad)."""
        return self.gravity_torque * math.cos(q + self.gravity_offset)

    def gravity_rate(self, q: float, dq: float) -> float:
        """d g(q)/dt = g'(q) q' (N m/s)."""
        return self.gravity_slope(q) * dq

    def regulation_target(self, q_d: float, dq_d: float) -> RegulationTarget:
        """See :func:`regulation_target`."""
        return regulation_target(self, q_d, dq_d)

    def link_motion(self, q: float, dq: float, tau_s: float, dtau_s: float) -> LinkMotion:
        """Model-based link acceleration (tau_s - g(q)) / M (rad/s^2) and jerk (tau_s' - g'(q) q') / M (rad/s^3)."""
        m = self.link_inertia
        return LinkMotion((tau_s - self.gravity(q)) / m, (dtau_s - self.gravity_slope(q) * dq) / m)


@dataclass(frozen=True)
class ChainNominal:
    """The controller's model of a robot with coupled links: the interface of
    :class:`NominalModel` on arrays (one entry per joint).

    ``links`` is a link-dynamics object (dynamics.links.IndependentLinks or
    dynamics.urdf_chain.UrdfChain); ``motor_inertia`` B and ``spring_stiffness`` K are diagonal.
    The acceleration is forward dynamics (ABA) with the spring torques; the jerk comes from its
    analytic derivatives (design notes, section 4): dFD/dq q' + dFD/dq' q''_m + M^-1 tau_s', and
    the same derivatives pass yields the acceleration (LinkDynamics.motion).
    """

    links: object
    motor_inertia: np.ndarray
    spring_stiffness: np.ndarray
    _held: list = field(default_factory=list, init=False, repr=False, compare=False)  # regulation_target's last

    def regulation_target(self, q_d: np.ndarray, dq_d: np.ndarray) -> RegulationTarget:
        """See :func:`regulation_target`; kept while q_d and q_d' stay the same (a set point costs one
        pass of the link dynamics, not one per tick). The arrays returned are shared: read them only."""
        held = self._held
        if held and (held[0] == q_d).all() and (held[1] == dq_d).all():
            return held[2]
        target = regulation_target(self, q_d, dq_d)
        held[:] = (np.array(q_d, dtype=float), np.array(dq_d, dtype=float), target)  # copies: callers reuse arrays
        return target

    def gravity(self, q: np.ndarray) -> np.ndarray:
        """g(q) (N m)."""
        return self.links.gravity(q)

    def gravity_rate(self, q: np.ndarray, dq: np.ndarray) -> np.ndarray:
        """d g(q)/dt = (dg/dq) q' (N m/s)."""
        return self.links.gravity_jacobian(q).dot(dq)

    def link_motion(self, q: np.ndarray, dq: np.ndarray, tau_s: np.ndarray, dtau_s: np.ndarray) -> LinkMotion:
        """Forward dynamics with the spring torques (rad/s^2) and its derivative along the motion (rad/s^3)."""
        return self.links.motion(q, dq, tau_s, dtau_s)


@dataclass(frozen=True)
class Gains:
    """Gains of all laws; each law reads the ones it needs (SI units)."""

    motor_stiffness: float = param("N m/rad", "nonnegative", "K: motor (motor_pd) or eta position gain", 0.0)
    motor_damping: float = param("N m s/rad", "nonnegative", "D: motor (motor_pd) or eta damping gain", 0.0)
    link_damping: float = param("N m s/rad", "nonnegative", "D_l (link_damping) or D_v (decoupled laws)", 0.0)
    link_stiffness: float = param("N m/rad", "nonnegative", "K_l: link stiffness of decoupled_impedance", 0.0)
    decoupling_stiffness: float = param("N m/rad", "positive", "k_v: virtual spring in front of the damper", 100.0)
    virtual_mass: float = param("kg m^2", "nonnegative", "m_v: virtual damper mass (0: first-order damper)", 0.0)
    motor_inertia_target: float = param("kg m^2", "nonnegative", "B_d: shaped motor inertia (0: no shaping)", 0.0)


def _eta_regulation(model: NominalModel, gains: Gains, ref, eta: float, deta: float) -> float:
    """u2 of the transformed laws: PD on eta around eta_d = q_d + g(q_d)/k, gravity feed-forward."""
    g_d, eta_d, deta_d = model.regulation_target(ref[0], ref[1])
    return g_d - gains.motor_stiffness * (eta - eta_d) - gains.motor_damping * (deta - deta_d)


class Law:
    """Base of all laws: no internal state, zero torque."""

    name = "zero"
    n_states = 0

    def __init__(self, model: NominalModel, gains: Gains, torque_sensor: bool = False):
        self.model = model
        self.gains = gains
        self.torque_sensor = torque_sensor  # take the spring torque from the reading's tau_s

    def output(self, s: JointSample, ref, z) -> float:
        return 0.0 * s.q  # zero, per joint on a chain

    def state_rate(self, s: JointSample, ref, z) -> tuple:
        return ()

    def state_matrices(self):
        """(A, b) of the linear state equation z' = A z + b q, or None without states."""
        return None

    def initial_state(self, s: JointSample) -> tuple:
        """States at rest on the measured link position."""
        return ()


class MotorPD(Law):
    name = "motor_pd"

    def output(self, s, ref, z):
        g = self.gains
        g_d, theta_d, dtheta_d = self.model.regulation_target(ref[0], ref[1])
        return g.motor_stiffness * (theta_d - s.theta) - g.motor_damping * (s.dtheta - dtheta_d) + g_d


class _Transformed(Law):
    """Structure-preserving transformation; subclasses give u1 and its two derivatives.

    Motor inertia shaping ``u2 <- r u2 + (1 - r) k (eta - q)`` with ``r = B / B_d`` per joint
    (``r = 1``, unshaped, where B_d is unset: 0); ``r`` and ``B / k`` are fixed with the gains.
    """

    def __init__(self, model, gains: Gains, torque_sensor: bool = False):
        super().__init__(model, gains, torque_sensor)
        b, b_d = model.motor_inertia, gains.motor_inertia_target
        self._inertia_over_stiffness = b / model.spring_stiffness
        if isinstance(b_d, np.ndarray):  # per joint
            ratio = np.divide(b, b_d, out=np.ones(len(b_d)), where=b_d > 0.0)
            self._shaping = ratio if np.any(b_d > 0.0) else None
        else:
            self._shaping = b / b_d if b_d > 0.0 else None

    def link_input(self, s: JointSample, ref, z, ddq: float, dddq: float):
        """(u1, u1', u1'') given the model-based link acceleration and jerk."""
        raise NotImplementedError

    def output(self, s, ref, z):
        m = self.model
        k = m.spring_stiffness
        spring = s.tau_s if self.torque_sensor else k * (s.theta - s.q)
        ddq, dddq = m.link_motion(s.q, s.dq, spring, k * (s.dtheta - s.dq))
        u1, du1, ddu1 = self.link_input(s, ref, z, ddq, dddq)
        eta, deta = s.theta - u1 / k, s.dtheta - du1 / k
        u2 = _eta_regulation(m, self.gains, ref, eta, deta)
        ratio = self._shaping
        if ratio is not None:
            u2 = ratio * u2 + (1.0 - ratio) * k * (eta - s.q)
        return u2 + u1 + self._inertia_over_stiffness * ddu1


class LinkDamping(_Transformed):
    name = "link_damping"

    def link_input(self, s, ref, z, ddq, dddq):
        d = self.gains.link_damping
        return -d * s.dq, -d * ddq, -d * dddq


class DecoupledDamper(_Transformed):
    """Damper D_v behind a virtual spring k_v; states z = (x,) or (x, x') with a virtual mass."""

    name = "decoupled_damper"

    def __init__(self, model, gains: Gains, torque_sensor: bool = False):
        super().__init__(model, gains, torque_sensor)
        self.n_states = 2 if np.all(np.asarray(gains.virtual_mass) > 0.0) else 1  # fixed per law instance

    def _damper(self, s, z):
        """(x', x'') of the virtual damper."""
        g = self.gains
        k_v, d_v, m_v = g.decoupling_stiffness, g.link_damping, g.virtual_mass
        if self.n_states == 2:
            x, dx = z
            return dx, (k_v * (s.q - x) - d_v * dx) / m_v
        dx = k_v * (s.q - z[0]) / d_v
        return dx, k_v * (s.dq - dx) / d_v

    def link_input(self, s, ref, z, ddq, dddq):
        k_v = self.gains.decoupling_stiffness
        dx, ddx = self._damper(s, z)
        return -k_v * (s.q - z[0]), -k_v * (s.dq - dx), -k_v * (ddq - ddx)

    def state_rate(self, s, ref, z):
        dx, ddx = self._damper(s, z)
        return (dx, ddx) if self.n_states == 2 else (dx,)

    def state_matrices(self):
        """(A, b) of z' = A z + b q; with per-joint gains (arrays) the joints' systems stack on a last axis."""
        g = self.gains
        k_v, d_v, m_v = g.decoupling_stiffness, g.link_damping, g.virtual_mass
        if self.n_states == 2:
            zero = 0.0 * k_v
            return np.array([[zero, zero + 1.0], [-k_v / m_v, -d_v / m_v]]), np.array([zero, k_v / m_v])
        return np.array([[-k_v / d_v]]), np.array([k_v / d_v])

    def initial_state(self, s):
        return (s.q, s.dq) if self.n_states == 2 else (s.q,)


class DecoupledImpedance(DecoupledDamper):
    """Link stiffness K_l around q_d plus the decoupled damper."""

    name = "decoupled_impedance"

    def link_input(self, s, ref, z, ddq, dddq):
        q_d, dq_d, ddq_d = ref
        k_l = self.gains.link_stiffness
        u1, du1, ddu1 = super().link_input(s, ref, z, ddq, dddq)
        return u1 - k_l * (s.q - q_d), du1 - k_l * (s.dq - dq_d), ddu1 - k_l * (ddq - ddq_d)


_LAWS = {cls.name: cls for cls in (Law, MotorPD, LinkDamping, DecoupledDamper, DecoupledImpedance)}


def check_gains(name: str, gains: Gains) -> None:
    """Raise ValueError naming the gain when ``gains`` cannot run law ``name``."""
    if name not in _LAWS:
        raise ValueError(f"law: unknown law {name!r}; choose one of {', '.join(LAW_NAMES)}")
    mass = np.asarray(gains.virtual_mass) > 0.0
    if mass.ndim and mass.any() and not mass.all():
        raise ValueError("virtual_mass: on a chain every joint's damper has a virtual mass, or none has")
    if name in ("decoupled_damper", "decoupled_impedance") and np.any(np.asarray(gains.link_damping) <= 0.0):
        raise ValueError(f"link_damping: {name} needs a positive damper (got {gains.link_damping})")


def make_law(name: str, model: NominalModel, gains: Gains, torque_sensor: bool = False) -> Law:
    """Build the law called ``name`` (one of LAW_NAMES).

    torque_sensor: the model-based link acceleration uses the measured spring torque
    (``JointSample.tau_s``, which the controllers' safety filters require finite before the law
    runs) instead of ``k (theta - q)``; it then also sees a progressive spring's stiffening.
    """
    check_gains(name, gains)
    return _LAWS[name](model, gains, torque_sensor)
