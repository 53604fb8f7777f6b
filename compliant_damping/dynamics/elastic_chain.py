"""Elastic-joint robot on top of any link dynamics: motors, springs, friction, end stops, contact.

The reduced elastic-joint model (Spong, 1987) for n joints, link-side units, gear folded in::

    M(q) q'' + c(q, q') + g(q) = tau_s - D_q q' + tau_stop(q, q') + tau_contact(q, q') + tau_ext
    B theta''                  = tau_m - tau_s - D_th theta' - tau_c tanh(theta' / v_c)
    tau_s                      = K phi + K3 phi^3 + D_s phi',   phi = theta - q

``M``, ``c``, ``g`` come from a link-dynamics object (dynamics.links.IndependentLinks or
dynamics.urdf_chain.UrdfChain, anything with ``forward``, ``kinetic_energy`` and
``potential_energy``; contacts also need ``frame_position`` and ``frame_jacobian``). B, K and the
friction terms are diagonal, one elastic element per joint (:class:`ElasticElements`). End stops
are one-sided spring-dampers per joint that only push; a :class:`PlaneContact` is a push-only
spring-damper between a named frame and a plane, acting on the links through ``J(q)^T n f``.

The state is an (n, 4) array of rows ``[q, q', theta, theta']`` as in model.py. The fixed-step
integrator is classical RK4 with the motor torque held over the interval and saturated at the
driver limit.
"""
from __future__ import annotations

from dataclasses import dataclass, fields

import numpy as np

__all__ = ["ElasticElements", "PlaneContact", "ElasticChain"]


@dataclass(frozen=True)
class ElasticElements:
    """Per-joint motor and elastic-element parameters (arrays of length n, SI link-side units)."""

    motor_inertia: np.ndarray        # B, kg m^2
    spring_stiffness: np.ndarray     # K, N m/rad
    spring_cubic: np.ndarray         # K3, N m/rad^3
    spring_damping: np.ndarray       # D_s, N m s/rad
    link_viscous: np.ndarray         # D_q, N m s/rad
    motor_viscous: np.ndarray        # D_th, N m s/rad
    motor_coulomb: np.ndarray        # tau_c, N m
    coulomb_speed: np.ndarray        # v_c, rad/s
    stop_lower: np.ndarray           # rad (-inf: none)
    stop_upper: np.ndarray           # rad (inf: none)
    stop_stiffness: np.ndarray       # N m/rad
    stop_damping: np.ndarray         # N m s/rad
    driver_torque_limit: np.ndarray  # N m (inf: none)

    @classmethod
    def lossless(cls, motor_inertia, spring_stiffness) -> "ElasticElements":
        """Linear springs only: no damping, friction, end stops or driver saturation."""
        b = np.asarray(motor_inertia, dtype=float)
        zero, inf = np.zeros(len(b)), np.full(len(b), np.inf)
        return cls(motor_inertia=b, spring_stiffness=np.asarray(spring_stiffness, dtype=float), spring_cubic=zero,
                   spring_damping=zero, link_viscous=zero, motor_viscous=zero, motor_coulomb=zero,
                   coulomb_speed=np.ones(len(b)), stop_lower=-inf, stop_upper=inf, stop_stiffness=zero,
                   stop_damping=zero, driver_torque_limit=inf)

    @classmethod
    def from_joint_params(cls, joints) -> "ElasticElements":
        """From model.JointParams per joint (their link inertia and gravity are the links' business)."""
        return cls(**{f.name: np.array([getattr(j, f.name) for j in joints], dtype=float) for f in fields(cls)})


@dataclass(frozen=True)
class PlaneContact:
    """Push-only spring-damper between frame ``frame`` and the plane ``normal . p = height`` (m).

    The frame penetrates when ``normal . p < height``; the normal force
    ``f = max(stiffness d + damping d', 0)`` with depth ``d = height - normal . p`` only pushes
    (the damper resists the penetration speed d' = -normal . v, as the end stops' does).
    """

    frame: str
    height: float = 0.0
    normal: tuple = (0.0, 0.0, 1.0)
    stiffness: float = 1.0e5   # N/m
    damping: float = 500.0     # N s/m

    def depth_and_jacobian(self, links, q):
        """(depth m, normal row of the frame's linear Jacobian n^T J, 1 x n)."""
        n = np.asarray(self.normal, dtype=float)
        depth = self.height - float(n @ links.frame_position(self.frame, q))
        return depth, n @ links.frame_jacobian(self.frame, q)[:3]

    def torque(self, links, q, dq) -> np.ndarray:
        """Joint torques of the contact force (N m), zero without penetration."""
        depth, row = self.depth_and_jacobian(links, q)
        if depth <= 0.0:
            return np.zeros(len(q))
        force = max(self.stiffness * depth - self.damping * float(row @ dq), 0.0)  # d' = -n.J q'
        return row * force

    def energy(self, links, q) -> float:
        depth, _ = self.depth_and_jacobian(links, q)
        return 0.5 * self.stiffness * depth * depth if depth > 0.0 else 0.0


class ElasticChain:
    """The elastic-joint robot: link dynamics ``links``, :class:`ElasticElements`, contacts."""

    def __init__(self, links, elements: ElasticElements, contacts=()):
        self.links, self.e, self.contacts = links, elements, tuple(contacts)
        self.n = len(elements.motor_inertia)

    def spring_torque(self, x: np.ndarray) -> np.ndarray:
        """tau_s per joint (N m) for the (n, 4) state."""
        e = self.e
        phi = x[:, 2] - x[:, 0]
        return e.spring_stiffness * phi + e.spring_cubic * phi ** 3 + e.spring_damping * (x[:, 3] - x[:, 1])

    def _stop_torque(self, q, dq):
        e = self.e
        below, above = np.maximum(e.stop_lower - q, 0.0), np.maximum(q - e.stop_upper, 0.0)
        push_up = np.where(below > 0.0, np.maximum(e.stop_stiffness * below - e.stop_damping * dq, 0.0), 0.0)
        push_down = np.where(above > 0.0, np.minimum(-e.stop_stiffness * above - e.stop_damping * dq, 0.0), 0.0)
        return push_up + push_down

    def rates(self, x: np.ndarray, tau_m: np.ndarray, tau_ext: np.ndarray) -> np.ndarray:
        """Time derivative of the (n, 4) state for held motor torques ``tau_m`` and link torques ``tau_ext``."""
        e = self.e
        q, dq, dth = x[:, 0], x[:, 1], x[:, 3]
        tau_s = self.spring_torque(x)
        link = tau_s - e.link_viscous * dq + self._stop_torque(q, dq) + tau_ext
        for contact in self.contacts:
            link = link + contact.torque(self.links, q, dq)
        friction = e.motor_viscous * dth + e.motor_coulomb * np.tanh(dth / e.coulomb_speed)
        out = np.empty_like(x)
        out[:, 0], out[:, 2] = dq, dth
        out[:, 1] = self.links.forward(q, dq, link)
        out[:, 3] = (tau_m - tau_s - friction) / e.motor_inertia
        return out

    def advance(self, x: np.ndarray, tau_m, external, t0: float, h: float, steps: int) -> np.ndarray:
        """Advance ``x`` in place by ``steps`` RK4 steps of ``h`` s from ``t0``; returns the applied torques.

        ``external(t)`` gives the scripted link torques (N m, length n) at time t.
        """
        lim = self.e.driver_torque_limit
        tau = np.clip(np.asarray(tau_m, dtype=float), -lim, lim)
        for i in range(steps):
            t = t0 + i * h
            mid = external(t + 0.5 * h)
            k1 = self.rates(x, tau, external(t))
            k2 = self.rates(x + 0.5 * h * k1, tau, mid)
            k3 = self.rates(x + 0.5 * h * k2, tau, mid)
            k4 = self.rates(x + h * k3, tau, external(t + h))
            x += h / 6.0 * (k1 + 2.0 * k2 + 2.0 * k3 + k4)
        return tau

    def energy(self, x: np.ndarray) -> float:
        """Stored energy (J): link kinetic and potential, motor kinetic, springs, end stops, contacts."""
        e = self.e
        q, dq, dth = x[:, 0], x[:, 1], x[:, 3]
        phi = x[:, 2] - q
        pen = np.maximum(np.maximum(e.stop_lower - q, q - e.stop_upper), 0.0)
        total = (self.links.kinetic_energy(q, dq) + self.links.potential_energy(q)
                 + float(np.sum(0.5 * e.motor_inertia * dth ** 2 + 0.5 * e.spring_stiffness * phi ** 2
                                + 0.25 * e.spring_cubic * phi ** 4 + 0.5 * e.stop_stiffness * pen ** 2)))
        return total + sum(c.energy(self.links, q) for c in self.contacts)
