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
    keeps the joint's shape, M q'' = k (eta - q) + u1 - g(q), B eta'' = k (q - eta) + u2.
    The damping is anchored on the reference and the reference's inverse dynamics
    tau_d = M q_d'' + c + g(q_d) are fed forward (design notes, section 4, motion tracking):
    eta_d = q_d + tau_d/k, u2 = B eta_d'' + tau_d - K (eta - eta_d) - D (eta' - eta_d'),
    so that on the reference u1 = 0 and the plant follows q_d exactly. A set point gives
    tau_d = g(q_d) and u2 = g(q_d) - K (eta - eta_d) - D eta' (regulation). The reference
    must be continuous up to its fourth derivative, or a set point (:func:`check_reference`).
    Derivatives of u1 use the model-based link acceleration and jerk
    q''_m = (k (theta - q) - g(q))/M,  q'''_m = (k (theta' - q') - g'(q) q')/M
    (with a torque sensor, spring_torque_source: effort, q''_m = (tau_s - g(q))/M).

    * link_damping: u1 = -D_l (q' - q_d') (needs the link jerk: the reference design).
    * decoupled_damper: the damper sits behind a virtual spring k_v and follows the reference,
      m_v (x'' - q_d'') + D_v (x' - q_d') = k_v (q - x), u1 = -k_v (q - x) (m_v = 0: first
      order). Only the link acceleration enters the torque.
    * decoupled_impedance: u1 = -K_l (q - q_d) - k_v (q - x), the damper as above.

    Motor inertia shaping (``motor_inertia_target`` B_d > 0) replaces u2 by
    (B/B_d) u2 + (1 - B/B_d) k (eta - q), so that B_d eta'' = k (q - eta) + u2 (its
    feed-forward then uses B_d: B_d eta_d'').
"""
from __future__ import annotations

import math
from dataclasses import dataclass, field
from typing import NamedTuple

import numpy as np

from compliant_damping.control.sample import JointSample
from compliant_damping.dynamics.links import DrivingTorque, LinkMotion
from compliant_damping.fields import param

__all__ = ["LAW_NAMES", "RegulationTarget", "regulation_target", "MotionTarget", "motion_target", "NominalDrive",
           "NominalModel", "ChainNominal", "Gains", "Law", "MotorPD", "LinkDamping", "DecoupledDamper",
           "DecoupledImpedance", "check_gains", "check_reference", "make_law"]

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


class MotionTarget(NamedTuple):
    """What a reference motion asks of the links and the motor side (the transformed laws).

    Attributes (floats for a bench joint, one entry per joint on a chain)
    ----------
    torque :
        tau_d = M(q_d) q_d'' + c(q_d, q_d') + g(q_d) (N m), the link torque that drives the reference.
    position :
        eta_d = q_d + K^-1 tau_d (rad).
    speed :
        eta_d' = q_d' + K^-1 tau_d' (rad/s).
    acceleration :
        eta_d'' = q_d'' + K^-1 tau_d'' (rad/s^2).
    """

    torque: float
    position: float
    speed: float
    acceleration: float


def motion_target(model, ref) -> MotionTarget:
    """:class:`MotionTarget` of the reference ``ref`` (sample.Reference) on ``model``'s links and springs."""
    k = model.spring_stiffness
    d = model.driving_torque(ref)
    return MotionTarget(d.torque, ref.q + d.torque / k, ref.dq + d.rate / k, ref.ddq + d.second_rate / k)


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

    def driving_torque(self, ref) -> DrivingTorque:
        """Inverse dynamics along ``ref`` and its two time derivatives (N m, N m/s, N m/s^2), closed form:
        ``M q_d'' + g``, ``M q_d''' + g' q_d'``, ``M q_d'''' + g'' q_d'^2 + g' q_d''`` (g'' = -g)."""
        m, g, slope = self.link_inertia, self.gravity(ref.q), self.gravity_slope(ref.q)
        return DrivingTorque(m * ref.ddq + g, m * ref.dddq + slope * ref.dq,
                             m * ref.ddddq - g * ref.dq * ref.dq + slope * ref.ddq)

    def motion_target(self, ref) -> MotionTarget:
        """See :func:`motion_target`."""
        return motion_target(self, ref)

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
    _held: dict = field(default_factory=dict, init=False, repr=False, compare=False)  # last target of each kind

    def _kept(self, kind: str, key: tuple, compute):
        """``compute()``, kept while the reference fields ``key`` stay the same (a set point costs one
        pass of the link dynamics, not one per tick). The arrays returned are shared: read them only."""
        held = self._held.get(kind)
        if held is not None and all((a == b).all() for a, b in zip(held[0], key)):
            return held[1]
        target = compute()
        self._held[kind] = (tuple(np.array(v, dtype=float) for v in key), target)  # copies: callers reuse arrays
        return target

    def regulation_target(self, q_d: np.ndarray, dq_d: np.ndarray) -> RegulationTarget:
        """See :func:`regulation_target` (kept for a set point, as :meth:`_kept`)."""
        return self._kept("regulation", (q_d, dq_d), lambda: regulation_target(self, q_d, dq_d))

    def driving_torque(self, ref) -> DrivingTorque:
        """Inverse dynamics along ``ref`` and its two time derivatives (links.LinkDynamics.driving_torque)."""
        n = len(self.spring_stiffness)
        return self.links.driving_torque(*(np.broadcast_to(v, (n,)) for v in ref))

    def motion_target(self, ref) -> MotionTarget:
        """See :func:`motion_target` (kept for a set point, as :meth:`_kept`)."""
        return self._kept("motion", tuple(ref), lambda: motion_target(self, ref))

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


class Law:
    """Base of all laws: no internal state, zero torque.

    ``smoothness``: the highest reference derivative that must be continuous for a moving
    reference (set points always do; :func:`check_reference`).
    """

    name = "zero"
    n_states = 0
    smoothness = -1

    def __init__(self, model: NominalModel, gains: Gains, torque_sensor: bool = False):
        self.model = model
        self.gains = gains
        self.torque_sensor = torque_sensor  # take the spring torque from the reading's tau_s

    def output(self, s: JointSample, ref, z) -> float:
        return 0.0 * s.q  # zero, per joint on a chain

    def state_rate(self, s: JointSample, ref, z) -> tuple:
        return ()

    def state_matrix(self):
        """A of the state equation z' = A z + w, w independent of z (measurements and reference, held
        over a tick), or None without states."""
        return None

    def initial_state(self, s: JointSample) -> tuple:
        """States at rest on the measured link position."""
        return ()


class MotorPD(Law):
    name = "motor_pd"
    smoothness = 1  # theta_d' takes q_d'

    def output(self, s, ref, z):
        g = self.gains
        g_d, theta_d, dtheta_d = self.model.regulation_target(ref[0], ref[1])
        return g.motor_stiffness * (theta_d - s.theta) - g.motor_damping * (s.dtheta - dtheta_d) + g_d


class _Transformed(Law):
    """Structure-preserving transformation; subclasses give u1 and its two derivatives.

    Motor inertia shaping ``u2 <- r u2 + (1 - r) k (eta - q)`` with ``r = B / B_d`` per joint
    (``r = 1``, unshaped, where B_d is unset: 0); ``r``, ``B / k`` and the feed-forward inertia
    (B_d where shaped, else B) are fixed with the gains.
    """

    smoothness = 4  # u2 feeds eta_d'' forward: the fourth derivative of q_d

    def __init__(self, model, gains: Gains, torque_sensor: bool = False):
        super().__init__(model, gains, torque_sensor)
        b, b_d = model.motor_inertia, gains.motor_inertia_target
        self._inertia_over_stiffness = b / model.spring_stiffness
        if isinstance(b_d, np.ndarray):  # per joint
            ratio = np.divide(b, b_d, out=np.ones(len(b_d)), where=b_d > 0.0)
            self._shaping = ratio if np.any(b_d > 0.0) else None
            self._feedforward_inertia = np.where(b_d > 0.0, b_d, b)
        else:
            self._shaping = b / b_d if b_d > 0.0 else None
            self._feedforward_inertia = b_d if b_d > 0.0 else b

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
        g, target = self.gains, m.motion_target(ref)
        u2 = (self._feedforward_inertia * target.acceleration + target.torque
              - g.motor_stiffness * (eta - target.position) - g.motor_damping * (deta - target.speed))
        ratio = self._shaping
        if ratio is not None:
            u2 = ratio * u2 + (1.0 - ratio) * k * (eta - s.q)
        return u2 + u1 + self._inertia_over_stiffness * ddu1


class LinkDamping(_Transformed):
    name = "link_damping"

    def link_input(self, s, ref, z, ddq, dddq):
        d = self.gains.link_damping
        return -d * (s.dq - ref.dq), -d * (ddq - ref.ddq), -d * (dddq - ref.dddq)


class DecoupledDamper(_Transformed):
    """Damper D_v behind a virtual spring k_v, following the reference; states z = (x,) or (x, x') with a
    virtual mass."""

    name = "decoupled_damper"

    def __init__(self, model, gains: Gains, torque_sensor: bool = False):
        super().__init__(model, gains, torque_sensor)
        self.n_states = 2 if np.all(np.asarray(gains.virtual_mass) > 0.0) else 1  # fixed per law instance

    def _damper(self, s, ref, z):
        """(x', x'') of the virtual damper: m_v (x'' - q_d'') + D_v (x' - q_d') = k_v (q - x)."""
        g = self.gains
        k_v, d_v, m_v = g.decoupling_stiffness, g.link_damping, g.virtual_mass
        if self.n_states == 2:
            x, dx = z
            return dx, ref.ddq + (k_v * (s.q - x) - d_v * (dx - ref.dq)) / m_v
        dx = ref.dq + k_v * (s.q - z[0]) / d_v
        return dx, ref.ddq + k_v * (s.dq - dx) / d_v

    def link_input(self, s, ref, z, ddq, dddq):
        k_v = self.gains.decoupling_stiffness
        dx, ddx = self._damper(s, ref, z)
        return -k_v * (s.q - z[0]), -k_v * (s.dq - dx), -k_v * (ddq - ddx)

    def state_rate(self, s, ref, z):
        dx, ddx = self._damper(s, ref, z)
        return (dx, ddx) if self.n_states == 2 else (dx,)

    def state_matrix(self):
        """A of z' = A z + w; with per-joint gains (arrays) the joints' matrices stack on a last axis."""
        g = self.gains
        k_v, d_v, m_v = g.decoupling_stiffness, g.link_damping, g.virtual_mass
        if self.n_states == 2:
            zero = 0.0 * k_v
            return np.array([[zero, zero + 1.0], [-k_v / m_v, -d_v / m_v]])
        return np.array([[-k_v / d_v]])

    def initial_state(self, s):
        return (s.q, s.dq) if self.n_states == 2 else (s.q,)


class DecoupledImpedance(DecoupledDamper):
    """Link stiffness K_l around q_d plus the decoupled damper."""

    name = "decoupled_impedance"

    def link_input(self, s, ref, z, ddq, dddq):
        k_l = self.gains.link_stiffness
        u1, du1, ddu1 = super().link_input(s, ref, z, ddq, dddq)
        return u1 - k_l * (s.q - ref.q), du1 - k_l * (s.dq - ref.dq), ddu1 - k_l * (ddq - ref.ddq)


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


def check_reference(name: str, reference) -> None:
    """Raise ValueError, with the reason, when law ``name`` cannot follow ``reference`` (control.references).

    Set points (``reference.set_points``) suit every law. A moving reference must be continuous
    up to the derivative the law feeds forward: the transformed laws need the fourth
    (sinusoids, rest-to-rest moves, waypoint splines, cruises), motor_pd the first.
    """
    needed = _LAWS[name].smoothness
    if reference.set_points or reference.smoothness >= needed:
        return
    raise ValueError(f"reference: {name} feeds the reference's derivatives forward up to the {needed}th and needs "
                     f"them continuous; {type(reference).__name__} is continuous only up to derivative "
                     f"{reference.smoothness} (use a set point, a sinusoid, a rest-to-rest move or a waypoint spline)")


def make_law(name: str, model: NominalModel, gains: Gains, torque_sensor: bool = False) -> Law:
    """Build the law called ``name`` (one of LAW_NAMES).

    torque_sensor: the model-based link acceleration uses the measured spring torque
    (``JointSample.tau_s``, which the controllers' safety filters require finite before the law
    runs) instead of ``k (theta - q)``; it then also sees a progressive spring's stiffening.
    """
    check_gains(name, gains)
    return _LAWS[name](model, gains, torque_sensor)
