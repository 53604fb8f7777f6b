"""Link dynamics of a fixed-base elastic-joint robot described by a URDF, through Pinocchio.

Every joint named as elastic must be a revolute joint of the URDF; every other joint must be
fixed (joints that are not elastic are fixed in this version). Joint order is the order of the
given names, whatever the tree order of the URDF. Gravity acts along -z of the URDF's root link.

Pinocchio (PyPI ``pin``, imported as ``pinocchio``) is imported when a chain is built, so the
rest of the package works without it. Algorithms: CRBA for M(q), RNEA for inverse dynamics and
c(q, q'), ABA for forward dynamics and the analytic derivatives of ABA and RNEA (Carpentier and
Mansard 2018),
all as Pinocchio implements them. The Pinocchio model is fixed after construction; one
Pinocchio data object holds the working values (a chain is not thread safe).
"""
from __future__ import annotations

import os
import xml.etree.ElementTree as ET
from pathlib import Path
from typing import Sequence

import numpy as np

from compliant_damping.dynamics.links import (DrivingTorque, ForwardDerivatives, LinkDynamics, LinkMotion,
                                             RobotModelError, as_vector)
from compliant_damping.io.parameter_files import share_dir

__all__ = ["UrdfChain", "bundled_urdf", "DRIVING_STEP", "STANDARD_GRAVITY"]

STANDARD_GRAVITY = 9.81  # m/s^2, default magnitude of gravity (along -z of the URDF world)
DRIVING_STEP = 1e-3  # s: time step of UrdfChain.driving_torque's second derivative along the reference
MOVABLE = ("revolute", "continuous", "prismatic", "floating", "planar")


def bundled_urdf(name: str) -> Path:
    """Path of a bundled robot description in urdf/ (source tree or installed share folder)."""
    return share_dir() / "urdf" / name


def _check_description(xml: str, elastic: Sequence[str], source: str) -> None:
    """Structural checks with messages naming the joint or link; Pinocchio's own are terse.

    Raises
    ------
    RobotModelError
        Not well-formed XML, no ``<robot>`` root, a joint without parent, child or limits, a
        named joint absent or not revolute, a movable joint not named, a name given twice.
    """
    try:
        root = ET.fromstring(xml)
    except ET.ParseError as err:
        raise RobotModelError(source, f"not a well-formed URDF (XML error: {err})") from None
    if root.tag != "robot":
        raise RobotModelError(source, f"not a URDF: the root element is <{root.tag}>, not <robot>")
    links = {link.get("name") for link in root.findall("link")}
    joints = {}
    for joint in root.findall("joint"):
        name, kind = joint.get("name"), joint.get("type")
        for end in ("parent", "child"):
            element = joint.find(end)
            if element is None or element.get("link") not in links:
                raise RobotModelError(name, f"joint without a declared {end} link in {source}")
        if kind in ("revolute", "prismatic") and joint.find("limit") is None:
            raise RobotModelError(name, f"{kind} joint without <limit> (the URDF format requires one)")
        joints[name] = kind
    duplicates = sorted({n for n in elastic if list(elastic).count(n) > 1})
    if duplicates:
        raise RobotModelError(duplicates[0], "named twice in the elastic joints")
    for name in elastic:
        if name not in joints:
            raise RobotModelError(name, f"no such joint in {source} (joints: {', '.join(joints)})")
        if joints[name] != "revolute":
            raise RobotModelError(name, f"a {joints[name]} joint cannot be elastic; only revolute joints can")
    for name, kind in joints.items():
        if kind in MOVABLE and name not in elastic:
            raise RobotModelError(name, f"{kind} joint not listed as elastic; joints that are not elastic "
                                        "must be fixed in this version")


def _import_pinocchio():
    try:
        import pinocchio
    except ImportError as err:
        raise ImportError("UrdfChain needs Pinocchio: pip install pin==4.1.0 (requirements-common.txt)") from err
    return pinocchio


class UrdfChain(LinkDynamics):
    """Coupled links of a fixed-base robot from a URDF string (the ``robot_description``).

    Parameters
    ----------
    urdf_xml : str
        The URDF document itself (use :meth:`from_file` for a path).
    elastic_joints : sequence of str
        Names of the elastic joints, in the order of every vector and matrix of this chain.
    gravity : float, optional
        Magnitude of gravity along -z of the URDF world (m/s^2), default 9.81.
    source : str, optional
        Where the description came from, for error messages.

    Raises
    ------
    RobotModelError
        See :func:`_check_description`; also a link on the chain without inertia, a mass matrix
        that is singular at q = 0, a negative or non-finite gravity, a URDF Pinocchio refuses.
    """

    def __init__(self, urdf_xml: str, elastic_joints: Sequence[str], gravity: float = STANDARD_GRAVITY,
                 source: str = "robot_description"):
        names = tuple(elastic_joints)
        if not names:
            raise RobotModelError("elastic_joints", "at least one elastic joint is needed")
        if not (np.isfinite(gravity) and gravity >= 0.0):
            raise RobotModelError("gravity", f"must be finite and nonnegative (m/s^2), got {gravity}")
        _check_description(urdf_xml, names, source)
        pin = _import_pinocchio()
        try:
            model = pin.buildModelFromXML(urdf_xml)
        except ValueError as err:
            raise RobotModelError(source, f"Pinocchio could not build a model ({err}; urdfdom's reason is "
                                          "printed on stderr)") from None
        model.gravity.linear = np.array([0.0, 0.0, -float(gravity)])
        ids = [model.getJointId(name) for name in names]
        for name, jid in zip(names, ids):
            if model.inertias[jid].mass <= 0.0:
                child = ET.fromstring(urdf_xml).find(f"joint[@name='{name}']/child").get("link")
                raise RobotModelError(child, f"link moved by joint {name} has no inertia (no <inertial> or "
                                             "zero mass, itself and the links fixed to it)")
        assert model.nq == model.nv == len(names), "every movable joint is a named revolute joint"
        self.joint_names = names
        self.source = source
        self._pin = pin
        self._model = model
        self._data = model.createData()
        self._perm = np.array([model.joints[jid].idx_v for jid in ids])
        self._square = np.ix_(self._perm, self._perm)
        self._identity = bool(np.array_equal(self._perm, np.arange(len(names))))
        self._q = np.zeros(model.nq)   # working copies in Pinocchio's order (no per-call allocation)
        self._v = np.zeros(model.nv)
        self._w = np.zeros(model.nv)
        self._dw = np.zeros(model.nv)  # a torque rate, for motion()
        try:
            np.linalg.cholesky(self.mass_matrix(np.zeros(len(names))))
        except np.linalg.LinAlgError:
            raise RobotModelError(source, "the joint-space inertia matrix is singular at q = 0: some link "
                                          "has no inertia about its joint axis") from None

    @classmethod
    def from_file(cls, path: str | os.PathLike, elastic_joints: Sequence[str],
                  gravity: float = STANDARD_GRAVITY) -> "UrdfChain":
        """Chain from a URDF file (see the class for the parameters); a missing file names its path."""
        try:
            text = Path(path).read_text()
        except OSError as err:
            raise RobotModelError(str(path), f"cannot read the URDF ({err.strerror})") from None
        return cls(text, elastic_joints, gravity, source=str(path))

    @property
    def gravity_vector(self) -> np.ndarray:
        """Gravity acceleration in the URDF world (m/s^2), shape (3,)."""
        return self._model.gravity.linear.copy()

    @property
    def frame_names(self) -> tuple:
        """Names of the URDF's frames (links, joints and fixed frames)."""
        return tuple(f.name for f in self._model.frames)

    def _load(self, q, dq=None, w=None):
        """Copy user-ordered inputs into the Pinocchio-ordered working vectors."""
        self._q[self._perm] = as_vector(q, self.n, "q")
        if dq is not None:
            self._v[self._perm] = as_vector(dq, self.n, "dq")
        if w is not None:
            self._w[self._perm] = as_vector(w, self.n, "tau or ddq")

    def mass_matrix(self, q) -> np.ndarray:
        self._load(q)
        return self._pin.crba(self._model, self._data, self._q)[self._square]

    def coriolis(self, q, dq) -> np.ndarray:
        self._load(q, dq)
        pin, model, data = self._pin, self._model, self._data
        nle = pin.nonLinearEffects(model, data, self._q, self._v)
        return (nle - pin.computeGeneralizedGravity(model, data, self._q))[self._perm]

    def gravity(self, q) -> np.ndarray:
        self._load(q)
        return self._pin.computeGeneralizedGravity(self._model, self._data, self._q)[self._perm]

    def gravity_jacobian(self, q) -> np.ndarray:
        self._load(q)
        return self._pin.computeGeneralizedGravityDerivatives(self._model, self._data, self._q)[self._square]

    def forward(self, q, dq, tau) -> np.ndarray:
        self._load(q, dq, tau)
        return self._pin.aba(self._model, self._data, self._q, self._v, self._w)[self._perm]

    def forward_trusted(self, q: np.ndarray, dq: np.ndarray, tau: np.ndarray) -> np.ndarray:
        if self._identity:  # names in Pinocchio's order: no copies into the working vectors
            return self._pin.aba(self._model, self._data, q, dq, tau)
        self._q[self._perm], self._v[self._perm], self._w[self._perm] = q, dq, tau
        return self._pin.aba(self._model, self._data, self._q, self._v, self._w)[self._perm]

    def inverse(self, q, dq, ddq) -> np.ndarray:
        self._load(q, dq, ddq)
        return self._pin.rnea(self._model, self._data, self._q, self._v, self._w)[self._perm]

    def _torque_and_rate(self, q, v, a, j) -> tuple:
        """RNEA torque and its time derivative ``dtau/dq q' + dtau/dq' q'' + M q'''`` from Pinocchio's
        analytic RNEA derivatives, in Pinocchio's order (N m, N m/s)."""
        d_dq, d_dv, mass = self._pin.computeRNEADerivatives(self._model, self._data, q, v, a)
        return self._data.tau.copy(), d_dq.dot(v) + d_dv.dot(a) + mass.dot(j)

    def driving_torque(self, q, dq, ddq, dddq, ddddq) -> DrivingTorque:
        """RNEA and its first time derivative exactly (Pinocchio's analytic RNEA derivatives); the second
        derivative as the derivative of that first one along the reference's own Taylor expansion
        (the known, noise-free motion: position to fourth derivative at this instant), by the
        fourth-order central difference with step DRIVING_STEP (truncation of order h^4)."""
        n = self.n
        q, v, a = as_vector(q, n, "q"), as_vector(dq, n, "dq"), as_vector(ddq, n, "ddq")
        j, s = as_vector(dddq, n, "dddq"), as_vector(ddddq, n, "ddddq")
        p = self._perm
        order = np.empty((5, n))
        order[:, p] = q, v, a, j, s  # Pinocchio's joint order
        q, v, a, j, s = order
        tau, rate = self._torque_and_rate(q, v, a, j)

        def rate_at(h):
            return self._torque_and_rate(q + h * (v + h / 2 * (a + h / 3 * (j + h / 4 * s))),
                                         v + h * (a + h / 2 * (j + h / 3 * s)), a + h * (j + h / 2 * s), j + h * s)[1]
        h = DRIVING_STEP
        second = (8.0 * (rate_at(h) - rate_at(-h)) - (rate_at(2.0 * h) - rate_at(-2.0 * h))) / (12.0 * h)
        return DrivingTorque(tau[p], rate[p], second[p])

    def forward_derivatives(self, q, dq, tau) -> ForwardDerivatives:
        self._load(q, dq, tau)
        d_dq, d_dv, minv = self._pin.computeABADerivatives(self._model, self._data, self._q, self._v, self._w)
        return ForwardDerivatives(ddq=self._data.ddq[self._perm], ddq_dq=d_dq[self._square],
                                  ddq_dv=d_dv[self._square], minv=minv[self._square])

    def motion(self, q, dq, tau, dtau) -> LinkMotion:
        """q'' and q''' from one call of Pinocchio's ABA derivatives (see :meth:`LinkDynamics.motion`).

        The jerk is summed in Pinocchio's joint order and permuted once, as a vector.
        """
        self._load(q, dq, tau)
        self._dw[self._perm] = as_vector(dtau, self.n, "dtau")
        d_dq, d_dv, minv = self._pin.computeABADerivatives(self._model, self._data, self._q, self._v, self._w)
        d = ForwardDerivatives(ddq=self._data.ddq, ddq_dq=d_dq, ddq_dv=d_dv, minv=minv)
        return LinkMotion(d.ddq[self._perm], d.jerk(self._v, self._dw)[self._perm])

    def kinetic_energy(self, q, dq) -> float:
        self._load(q, dq)
        return float(self._pin.computeKineticEnergy(self._model, self._data, self._q, self._v))

    def potential_energy(self, q) -> float:
        """Gravitational potential energy (J), ``-sum m_i g . c_i`` with c_i the link centres of
        mass in the URDF world (zero at the height of the root link's origin); dV/dq = g(q)."""
        self._load(q)
        return float(self._pin.computePotentialEnergy(self._model, self._data, self._q))

    def _frame_id(self, frame: str) -> int:
        if not self._model.existFrame(frame):
            raise RobotModelError(frame, f"no such frame in {self.source} (frames: {', '.join(self.frame_names)})")
        return self._model.getFrameId(frame)

    def frame_position(self, frame: str, q) -> np.ndarray:
        """Position of the origin of ``frame`` in the URDF world (m), shape (3,).

        Raises
        ------
        RobotModelError
            No frame of that name.
        """
        fid = self._frame_id(frame)
        self._load(q)
        pin, model, data = self._pin, self._model, self._data
        pin.forwardKinematics(model, data, self._q)
        return pin.updateFramePlacement(model, data, fid).translation.copy()

    def frame_jacobian(self, frame: str, q) -> np.ndarray:
        """Jacobian of ``frame``, shape (6, n): linear (m/rad) rows first, then angular (1).

        Expressed in the world's axes at the frame's origin (Pinocchio's LOCAL_WORLD_ALIGNED):
        rows 0-2 map q' to the velocity of the frame origin in the world, rows 3-5 to the
        frame's angular velocity in the world. A contact force f (N, world axes) at the frame
        gives joint torques ``J[:3].T @ f``.

        Raises
        ------
        RobotModelError
            No frame of that name.
        """
        fid = self._frame_id(frame)
        self._load(q)
        pin = self._pin
        jac = pin.computeFrameJacobian(self._model, self._data, self._q, fid, pin.LOCAL_WORLD_ALIGNED)
        return np.asarray(jac).reshape(6, -1)[:, self._perm]  # one joint: eigenpy gives a flat (6,)
