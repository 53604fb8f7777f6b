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

The state is an (n, 4) array of rows ``[q, q', theta, theta']`` as in dynamics/bench_plant.py. The fixed-step
integrator is classical RK4 with the motor torque held over the interval and saturated at the
driver limit. Everything but the link dynamics and the contacts (springs, friction, end stops,
the RK4 sums) runs in numba kernels on a packed parameter array when numba is installed (the
same functions as plain Python otherwise); the link dynamics and the contacts are evaluated at
every RK4 stage's state, as before.
"""
from __future__ import annotations

from dataclasses import dataclass, fields

import numpy as np

from compliant_damping.dynamics.bench_plant import njit  # numba when installed, plain Python otherwise

__all__ = ["ElasticElements", "PlaneContact", "ElasticChain"]

# Rows of the kernels' packed (N_ROWS, n) array: parameters from ElasticElements, then the held
# motor torque and the stage's q, q' and net link torque (one array: fewer arguments to dispatch).
K, K3, DS, DQ, DTH, TC, VC, B, LOWER, UPPER, K_STOP, D_STOP, TAU_M, Q, DQ_STAGE, LINK = range(16)
N_ROWS = 16


@njit(cache=True)
def _spring(p, i, phi, dphi):
    """tau_s of joint i (N m) for the deflection phi (rad) and its rate dphi (rad/s)."""
    return p[K, i] * phi + p[K3, i] * phi ** 3 + p[DS, i] * dphi


@njit(cache=True)
def _spring_torques(p, x, out):
    """tau_s per joint (N m) of the (n, 4) state into ``out``."""
    for i in range(x.shape[0]):
        out[i] = _spring(p, i, x[i, 2] - x[i, 0], x[i, 3] - x[i, 1])


@njit(cache=True)
def _elastic_stage(p, x, k, c, tau_ext, out):
    """Rates at the RK4 stage state ``x + c k`` (``c = 0``: ``x`` itself), all but q''.

    Writes the stage's q, q' (rad, rad/s) and the net link torque without contacts (N m: spring,
    link damping, end stops, ``tau_ext``) into rows Q, DQ_STAGE, LINK of ``p``, and the rates q',
    theta', theta'' (motor torque from row TAU_M) into columns 0, 2, 3 of ``out``. An end stop
    only acts once its joint is past it, so a joint within its stops costs two comparisons.
    """
    for i in range(x.shape[0]):
        if c != 0.0:
            qi, dqi, thi, dthi = (x[i, 0] + c * k[i, 0], x[i, 1] + c * k[i, 1], x[i, 2] + c * k[i, 2],
                                  x[i, 3] + c * k[i, 3])
        else:
            qi, dqi, thi, dthi = x[i, 0], x[i, 1], x[i, 2], x[i, 3]
        tau_s = _spring(p, i, thi - qi, dthi - dqi)
        push_up = push_down = 0.0
        if qi < p[LOWER, i]:
            push_up = max(p[K_STOP, i] * (p[LOWER, i] - qi) - p[D_STOP, i] * dqi, 0.0)
        if qi > p[UPPER, i]:
            push_down = min(-p[K_STOP, i] * (qi - p[UPPER, i]) - p[D_STOP, i] * dqi, 0.0)
        friction = p[DTH, i] * dthi + p[TC, i] * np.tanh(dthi / p[VC, i])
        p[Q, i], p[DQ_STAGE, i] = qi, dqi
        p[LINK, i] = tau_s - p[DQ, i] * dqi + (push_up + push_down) + tau_ext[i]
        out[i, 0], out[i, 2] = dqi, dthi
        out[i, 3] = (p[TAU_M, i] - tau_s - friction) / p[B, i]


@njit(cache=True)
def _rk4_update(x, h, k1, k2, k3, k4):
    """x += h/6 (k1 + 2 k2 + 2 k3 + k4), in place."""
    w = h / 6.0
    for i in range(x.shape[0]):
        for j in range(x.shape[1]):
            x[i, j] += w * (k1[i, j] + 2.0 * k2[i, j] + 2.0 * k3[i, j] + k4[i, j])


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
    """Push-only spring-damper between frame ``frame`` and the plane ``normal . p = h(t)`` (m).

    The frame penetrates when ``normal . p < h(t)``; the normal force
    ``f = max(stiffness d + damping d', 0)`` with depth ``d = h(t) - normal . p`` only pushes
    (the damper resists the penetration speed ``d' = h'(t) - normal . v``, as the end stops' does).
    The plane may move along its normal: ``h(t) = height + speed * clip(t - start_time, 0,
    rise_time)``, a floor rising into a foot (speed > 0) for ``rise_time`` s, then at rest.
    """

    frame: str
    height: float = 0.0
    normal: tuple = (0.0, 0.0, 1.0)
    stiffness: float = 1.0e5   # N/m
    damping: float = 500.0     # N s/m
    speed: float = 0.0         # m/s along the normal while moving
    start_time: float = 0.0    # s
    rise_time: float = 0.0     # s of motion (0: the plane stays at ``height``)

    def height_at(self, t: float) -> float:
        """Plane height h(t) (m)."""
        return self.height + self.speed * min(max(t - self.start_time, 0.0), self.rise_time)

    def speed_at(self, t: float) -> float:
        """Plane speed h'(t) (m/s)."""
        return self.speed if self.start_time <= t < self.start_time + self.rise_time else 0.0

    def depth(self, links, q, t: float = 0.0) -> float:
        """Penetration depth (m) at time ``t`` (s), negative when the frame is clear of the plane."""
        return self.height_at(t) - float(np.asarray(self.normal, dtype=float) @ links.frame_position(self.frame, q))

    def normal_row(self, links, q) -> np.ndarray:
        """Normal row of the frame's linear Jacobian, n^T J (m/rad), shape (n,)."""
        return np.asarray(self.normal, dtype=float) @ links.frame_jacobian(self.frame, q)[:3]

    def depth_and_jacobian(self, links, q, t: float = 0.0):
        """(depth m, normal row of the frame's linear Jacobian n^T J, 1 x n)."""
        return self.depth(links, q, t), self.normal_row(links, q)

    def torque(self, links, q, dq, t: float = 0.0) -> np.ndarray:
        """Joint torques of the contact force (N m) at time ``t`` (s), zero without penetration
        (no Jacobian then)."""
        depth = self.depth(links, q, t)
        if depth <= 0.0:
            return np.zeros(len(q))
        row = self.normal_row(links, q)
        force = max(self.stiffness * depth + self.damping * (self.speed_at(t) - float(row @ dq)), 0.0)
        return row * force

    def energy(self, links, q, t: float = 0.0) -> float:
        depth = self.depth(links, q, t)
        return 0.5 * self.stiffness * depth * depth if depth > 0.0 else 0.0


class ElasticChain:
    """The elastic-joint robot: link dynamics ``links``, :class:`ElasticElements`, contacts.

    Holds working arrays for its kernels, so one chain is not thread safe (as UrdfChain).
    """

    def __init__(self, links, elements: ElasticElements, contacts=()):
        self.links, self.e, self.contacts = links, elements, tuple(contacts)
        self.n = n = len(elements.motor_inertia)
        e = elements
        rows = {K: e.spring_stiffness, K3: e.spring_cubic, DS: e.spring_damping, DQ: e.link_viscous,
                DTH: e.motor_viscous, TC: e.motor_coulomb, VC: e.coulomb_speed, B: e.motor_inertia,
                LOWER: e.stop_lower, UPPER: e.stop_upper, K_STOP: e.stop_stiffness, D_STOP: e.stop_damping}
        self._p = np.zeros((N_ROWS, n))
        for r, value in rows.items():
            self._p[r] = value
        self._stage_q, self._stage_dq, self._stage_link = self._p[Q], self._p[DQ_STAGE], self._p[LINK]  # views
        self._k = np.zeros((4, n, 4))  # the RK4 stages' rates

    def spring_torque(self, x: np.ndarray) -> np.ndarray:
        """tau_s per joint (N m) for the (n, 4) state."""
        out = np.empty(self.n)
        _spring_torques(self._p, np.ascontiguousarray(x, dtype=float), out)
        return out

    def _stage(self, x, k, c: float, tau_ext, t: float, out) -> None:
        """Rates at the state ``x + c k`` and time ``t`` (s) into ``out`` for the motor torque in
        row TAU_M: elastic kernel, contacts, then the links' q''."""
        _elastic_stage(self._p, x, k, c, np.asarray(tau_ext, dtype=float), out)
        q, dq, link = self._stage_q, self._stage_dq, self._stage_link
        for contact in self.contacts:
            link += contact.torque(self.links, q, dq, t)
        out[:, 1] = self.links.forward_trusted(q, dq, link)

    def rates(self, x: np.ndarray, tau_m: np.ndarray, tau_ext: np.ndarray, t: float = 0.0) -> np.ndarray:
        """Time derivative of the (n, 4) state at time ``t`` (s, for moving contacts) for held motor
        torques ``tau_m`` and link torques ``tau_ext``."""
        x = np.ascontiguousarray(x, dtype=float)
        out = np.empty_like(x)
        self._p[TAU_M] = tau_m
        self._stage(x, x, 0.0, tau_ext, t, out)
        return out

    def advance(self, x: np.ndarray, tau_m, external, t0: float, h: float, steps: int) -> np.ndarray:
        """Advance ``x`` (C-ordered floats) in place by ``steps`` RK4 steps of ``h`` s from ``t0``;
        returns the applied torques.

        ``external(t)`` gives the scripted link torques (N m, length n) at time t; each RK4 step
        holds its value at the step's midpoint (as dynamics.bench_plant.advance), so a pulse whose
        ends lie on the step grid delivers exactly its impulse.
        """
        lim = self.e.driver_torque_limit
        tau = np.clip(np.asarray(tau_m, dtype=float), -lim, lim)
        self._p[TAU_M] = tau
        k1, k2, k3, k4 = self._k
        for i in range(steps):
            t = t0 + i * h
            held = external(t + 0.5 * h)
            self._stage(x, x, 0.0, held, t, k1)
            self._stage(x, k1, 0.5 * h, held, t + 0.5 * h, k2)
            self._stage(x, k2, 0.5 * h, held, t + 0.5 * h, k3)
            self._stage(x, k3, h, held, t + h, k4)
            _rk4_update(x, h, k1, k2, k3, k4)
        return tau

    def energy(self, x: np.ndarray, t: float = 0.0) -> float:
        """Stored energy (J) at time ``t`` (s): link kinetic and potential, motor kinetic, springs,
        end stops, contacts."""
        e = self.e
        q, dq, dth = x[:, 0], x[:, 1], x[:, 3]
        phi = x[:, 2] - q
        pen = np.maximum(np.maximum(e.stop_lower - q, q - e.stop_upper), 0.0)
        total = (self.links.kinetic_energy(q, dq) + self.links.potential_energy(q)
                 + float(np.sum(0.5 * e.motor_inertia * dth ** 2 + 0.5 * e.spring_stiffness * phi ** 2
                                + 0.25 * e.spring_cubic * phi ** 4 + 0.5 * e.stop_stiffness * pen ** 2)))
        return total + sum(c.energy(self.links, q, t) for c in self.contacts)
