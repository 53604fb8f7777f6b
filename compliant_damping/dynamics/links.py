"""Link-side rigid-body dynamics of a robot, ``M(q) q'' + c(q, q') + g(q) = tau``.

One interface, :class:`LinkDynamics`, for every robot the core drives: independent pendulum
joints (:class:`IndependentLinks`, closed form, no Pinocchio) or a coupled chain described by a
URDF (:class:`compliant_damping.dynamics.urdf_chain.UrdfChain`, through Pinocchio).

Conventions: ``n`` joints in the order of :attr:`LinkDynamics.joint_names`; link-side SI units
(rad, rad/s, rad/s^2, N m, kg m^2, J). Arrays in, new arrays out (callers may keep them).
``tau`` is the net joint torque acting on the links (spring torque, friction and external
torques already summed). Geometry (frame positions and Jacobians) exists only where a robot
description gives it: it is part of ``UrdfChain``, not of this interface.
"""
from __future__ import annotations

from abc import ABC, abstractmethod
from dataclasses import dataclass
from typing import NamedTuple, Sequence

import numpy as np

__all__ = ["RobotModelError", "ForwardDerivatives", "LinkMotion", "DrivingTorque", "LinkDynamics", "IndependentLinks"]


class RobotModelError(ValueError):
    """A robot description that cannot be used, naming the offending item.

    Parameters
    ----------
    key : str
        What is wrong: a joint, link or frame name, a parameter name, or the description's source.
    reason : str
        Why, for people.
    """

    def __init__(self, key: str, reason: str):
        super().__init__(f"{key}: {reason}")
        self.key = key
        self.reason = reason


@dataclass(frozen=True)
class ForwardDerivatives:
    """Forward dynamics ``q'' = FD(q, q', tau)`` and its partial derivatives at one state.

    Attributes
    ----------
    ddq : ndarray, shape (n,)
        Link acceleration q'' (rad/s^2).
    ddq_dq : ndarray, shape (n, n)
        d q'' / d q (1/s^2).
    ddq_dv : ndarray, shape (n, n)
        d q'' / d q' (1/s).
    minv : ndarray, shape (n, n)
        d q'' / d tau = M(q)^-1 (1/(kg m^2)).
    """

    ddq: np.ndarray
    ddq_dq: np.ndarray
    ddq_dv: np.ndarray
    minv: np.ndarray

    def jerk(self, dq: np.ndarray, dtau: np.ndarray) -> np.ndarray:
        """Time derivative of q'' along a motion with velocity ``dq`` (rad/s) and torque rate ``dtau``
        (N m/s): ``dFD/dq q' + dFD/dq' q'' + M^-1 tau'`` (rad/s^3), in the order of these arrays.

        (``ndarray.dot``: for these small matrix-vector products about half the call cost of ``@``.)"""
        return self.ddq_dq.dot(dq) + self.ddq_dv.dot(self.ddq) + self.minv.dot(dtau)


class LinkMotion(NamedTuple):
    """Model-based link acceleration and jerk at one state (arrays per joint; floats for a bench joint).

    Attributes
    ----------
    acceleration : ndarray, shape (n,)
        q'' = FD(q, q', tau) (rad/s^2).
    jerk : ndarray, shape (n,)
        q''' along the motion (rad/s^3), as :meth:`LinkDynamics.jerk`.
    """

    acceleration: np.ndarray
    jerk: np.ndarray


class DrivingTorque(NamedTuple):
    """The link torque that drives a desired motion, and its first two time derivatives along it.

    Attributes (arrays per joint; floats for a bench joint)
    ----------
    torque : ndarray, shape (n,)
        tau_d = M(q_d) q_d'' + c(q_d, q_d') + g(q_d) (N m): inverse dynamics (RNEA).
    rate : ndarray, shape (n,)
        Its time derivative tau_d' (N m/s).
    second_rate : ndarray, shape (n,)
        Its second time derivative tau_d'' (N m/s^2).
    """

    torque: np.ndarray
    rate: np.ndarray
    second_rate: np.ndarray


def as_vector(x, n: int, name: str) -> np.ndarray:
    """``x`` as a float array of shape (n,); ValueError naming ``name`` otherwise."""
    out = np.asarray(x, dtype=float)
    if out.shape != (n,):
        raise ValueError(f"{name}: expected shape ({n},), got {out.shape}")
    return out


class LinkDynamics(ABC):
    """Rigid-body dynamics of the links of an n-joint robot (see the module notes for units)."""

    joint_names: tuple

    @property
    def n(self) -> int:
        """Number of joints."""
        return len(self.joint_names)

    @abstractmethod
    def mass_matrix(self, q) -> np.ndarray:
        """Joint-space inertia matrix M(q), shape (n, n), kg m^2 (symmetric, positive definite)."""

    @abstractmethod
    def coriolis(self, q, dq) -> np.ndarray:
        """Coriolis and centrifugal torques c(q, q') (N m), gravity excluded, shape (n,)."""

    @abstractmethod
    def gravity(self, q) -> np.ndarray:
        """Gravity torques g(q) (N m), shape (n,): the torques that hold the links still at q."""

    @abstractmethod
    def gravity_jacobian(self, q) -> np.ndarray:
        """dg/dq (N m/rad), shape (n, n)."""

    @abstractmethod
    def forward(self, q, dq, tau) -> np.ndarray:
        """Forward dynamics: q'' (rad/s^2) solving M q'' + c + g = tau (N m), shape (n,)."""

    def forward_trusted(self, q: np.ndarray, dq: np.ndarray, tau: np.ndarray) -> np.ndarray:
        """:meth:`forward` for callers that already hold float arrays of shape (n,) (a simulator's
        inner loop): the same q'' (rad/s^2), with no conversion or shape check of the inputs."""
        return self.forward(q, dq, tau)

    @abstractmethod
    def inverse(self, q, dq, ddq) -> np.ndarray:
        """Inverse dynamics: tau = M q'' + c + g (N m) for the acceleration ``ddq`` (rad/s^2)."""

    @abstractmethod
    def driving_torque(self, q, dq, ddq, dddq, ddddq) -> DrivingTorque:
        """Inverse dynamics along a desired motion and its first two time derivatives.

        Parameters
        ----------
        q, dq, ddq, dddq, ddddq : array_like, shape (n,)
            The motion's position (rad) and its first four time derivatives (rad/s to rad/s^4),
            the fields of a control.sample.Reference. A known, noise-free reference: measured
            signals never come here.
        """

    @abstractmethod
    def forward_derivatives(self, q, dq, tau) -> ForwardDerivatives:
        """q'' and its partial derivatives with respect to q, q' and tau at one state."""

    @abstractmethod
    def kinetic_energy(self, q, dq) -> float:
        """Kinetic energy 1/2 q'^T M(q) q' of the links (J)."""

    @abstractmethod
    def potential_energy(self, q) -> float:
        """Gravitational potential energy of the links (J), up to a constant; dV/dq = g(q)."""

    def jerk(self, q, dq, tau, dtau) -> np.ndarray:
        """Model-based link jerk, the time derivative of q'' = FD(q, q', tau) along a motion.

        ``q''' = dFD/dq q' + dFD/dq' q'' + M^-1 tau'`` (design notes, section 4), with q'' the
        model acceleration FD(q, q', tau); nothing is differentiated numerically.

        Parameters
        ----------
        q, dq : array_like, shape (n,)
            Link positions (rad) and velocities (rad/s).
        tau, dtau : array_like, shape (n,)
            Net joint torque (N m) and its time derivative (N m/s).

        Returns
        -------
        ndarray, shape (n,)
            Link jerk q''' (rad/s^3).
        """
        return self.forward_derivatives(q, dq, tau).jerk(as_vector(dq, self.n, "dq"), as_vector(dtau, self.n, "dtau"))

    def motion(self, q, dq, tau, dtau) -> LinkMotion:
        """Link acceleration and jerk together from one pass of the forward-dynamics derivatives,
        which yields q'' as well: :meth:`forward` and :meth:`jerk` for the cost of the latter.

        Parameters as for :meth:`jerk`.
        """
        d = self.forward_derivatives(q, dq, tau)
        return LinkMotion(d.ddq, d.jerk(as_vector(dq, self.n, "dq"), as_vector(dtau, self.n, "dtau")))


class IndependentLinks(LinkDynamics):
    """Uncoupled pendulum links: ``M = diag(I)``, ``c = 0``, ``g_i = m g0 l_i sin(q_i + q_off,i)``.

    The built-in bench (one or several independent joints, no URDF, no Pinocchio). The same
    gravity law as the plant of :mod:`compliant_damping.dynamics.bench_plant`, with q = -q_off hanging down.

    Parameters
    ----------
    inertia : array_like, shape (n,)
        Link inertia about each joint axis (kg m^2), positive.
    gravity_torque : array_like, shape (n,)
        Pendulum load m g0 l per joint (N m), nonnegative (0: no gravity).
    gravity_offset : array_like, shape (n,)
        Pendulum angle offset q_off per joint (rad).
    joint_names : sequence of str, optional
        Joint names; ``joint_0``, ``joint_1``, ... when not given.

    Raises
    ------
    RobotModelError
        A parameter of the wrong length, a non-positive inertia, a negative or non-finite load.
    """

    def __init__(self, inertia, gravity_torque, gravity_offset, joint_names: Sequence[str] | None = None):
        inertia = np.atleast_1d(np.asarray(inertia, dtype=float))
        n = inertia.size
        names = tuple(joint_names) if joint_names is not None else tuple(f"joint_{i}" for i in range(n))
        arrays = {"inertia": inertia, "gravity_torque": np.atleast_1d(np.asarray(gravity_torque, dtype=float)),
                  "gravity_offset": np.atleast_1d(np.asarray(gravity_offset, dtype=float))}
        for key, value in arrays.items():
            if value.shape != (len(names),):
                raise RobotModelError(key, f"expected one value per joint ({len(names)}), got shape {value.shape}")
            if not np.all(np.isfinite(value)):
                raise RobotModelError(key, f"must be finite, got {value.tolist()}")
        if not np.all(inertia > 0.0):
            raise RobotModelError("inertia", f"must be positive, got {inertia.tolist()}")
        if not np.all(arrays["gravity_torque"] >= 0.0):
            raise RobotModelError("gravity_torque", f"must be nonnegative, got {arrays['gravity_torque'].tolist()}")
        self.joint_names = names
        self.inertia = inertia
        self.gravity_torque = arrays["gravity_torque"]
        self.gravity_offset = arrays["gravity_offset"]

    @classmethod
    def from_params(cls, joint_names: Sequence[str], params: Sequence) -> "IndependentLinks":
        """From per-joint parameter records with ``link_inertia`` (kg m^2), ``gravity_torque``
        (N m) and ``gravity_offset`` (rad), e.g. ``laws.NominalModel`` or ``model.JointParams``."""
        return cls([p.link_inertia for p in params], [p.gravity_torque for p in params],
                   [p.gravity_offset for p in params], joint_names)

    def mass_matrix(self, q) -> np.ndarray:
        as_vector(q, self.n, "q")
        return np.diag(self.inertia)

    def coriolis(self, q, dq) -> np.ndarray:
        as_vector(q, self.n, "q")
        as_vector(dq, self.n, "dq")
        return np.zeros(self.n)

    def gravity(self, q) -> np.ndarray:
        return self.gravity_torque * np.sin(as_vector(q, self.n, "q") + self.gravity_offset)

    def _gravity_slope(self, q) -> np.ndarray:
        """dg_i/dq_i (N m/rad), shape (n,)."""
        return self.gravity_torque * np.cos(as_vector(q, self.n, "q") + self.gravity_offset)

    def gravity_jacobian(self, q) -> np.ndarray:
        return np.diag(self._gravity_slope(q))

    def forward(self, q, dq, tau) -> np.ndarray:
        as_vector(dq, self.n, "dq")
        return (as_vector(tau, self.n, "tau") - self.gravity(q)) / self.inertia

    def inverse(self, q, dq, ddq) -> np.ndarray:
        as_vector(dq, self.n, "dq")
        return self.inertia * as_vector(ddq, self.n, "ddq") + self.gravity(q)

    def driving_torque(self, q, dq, ddq, dddq, ddddq) -> DrivingTorque:
        """Closed form, elementwise, with ``g_i = m g0 l sin(q_i + q_off,i)`` and I the inertia:
        ``tau = I q'' + g``, ``tau' = I q^(3) + g' q'``, ``tau'' = I q^(4) + g'' q'^2 + g' q''``."""
        q, dq, ddq = as_vector(q, self.n, "q"), as_vector(dq, self.n, "dq"), as_vector(ddq, self.n, "ddq")
        dddq, ddddq = as_vector(dddq, self.n, "dddq"), as_vector(ddddq, self.n, "ddddq")
        g, slope = self.gravity(q), self._gravity_slope(q)
        return DrivingTorque(self.inertia * ddq + g, self.inertia * dddq + slope * dq,
                             self.inertia * ddddq - g * dq * dq + slope * ddq)

    def forward_derivatives(self, q, dq, tau) -> ForwardDerivatives:
        return ForwardDerivatives(ddq=self.forward(q, dq, tau), ddq_dq=np.diag(-self._gravity_slope(q) / self.inertia),
                                  ddq_dv=np.zeros((self.n, self.n)), minv=np.diag(1.0 / self.inertia))

    def jerk(self, q, dq, tau, dtau) -> np.ndarray:
        """Model-based link jerk (rad/s^3), elementwise: ``(tau'_i - g_i'(q_i) q'_i) / I_i``.

        The closed form of :meth:`LinkDynamics.jerk` for uncoupled links (see there).
        """
        dq = as_vector(dq, self.n, "dq")
        as_vector(tau, self.n, "tau")
        return (as_vector(dtau, self.n, "dtau") - self._gravity_slope(q) * dq) / self.inertia

    def motion(self, q, dq, tau, dtau) -> LinkMotion:
        """:meth:`forward` and the closed-form :meth:`jerk` (see :meth:`LinkDynamics.motion`)."""
        return LinkMotion(self.forward(q, dq, tau), self.jerk(q, dq, tau, dtau))

    def kinetic_energy(self, q, dq) -> float:
        as_vector(q, self.n, "q")
        return 0.5 * float(self.inertia @ as_vector(dq, self.n, "dq") ** 2)

    def potential_energy(self, q) -> float:
        """Gravitational potential energy (J), ``-sum m g0 l cos(q + q_off)``: zero with the links
        horizontal, as a rigid-body library counts it with the joints at the origin height."""
        return -float(self.gravity_torque @ np.cos(as_vector(q, self.n, "q") + self.gravity_offset))
