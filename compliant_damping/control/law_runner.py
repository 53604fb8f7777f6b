"""Running a law tick by tick: the torque from the current states, then the states advanced by the
exact zero-order-hold solution over the tick (closed form, :func:`zoh_integral`), and bumpless starts."""
from __future__ import annotations

import math
from operator import mul

import numpy as np

from compliant_damping.control.laws import Law
from compliant_damping.control.sample import JointSample

__all__ = ["LawRunner", "zoh_integral"]


def zoh_integral(a: np.ndarray, dt: float) -> list:
    """``Phi = int_0^dt exp(A s) ds = A^-1 (exp(A dt) - I)`` in closed form, as nested lists.

    For z' = A z + w with w held over the tick, the exact zero-order-hold step is
    ``z(dt) = exp(A dt) z + Phi w = z + Phi z'(0)``: the state plus Phi times its rate at the
    tick's start. One state: ``Phi = (exp(a dt) - 1) / a``. Two states (Cayley-Hamilton, e.g.
    Chen, Linear System Theory and Design, on functions of a square matrix): with
    sigma = tr(A)/2 and d = sigma^2 - det(A), ``exp(A dt) = e^(sigma dt) (c I + s (A - sigma I))``
    where c, s = cos(w dt), sin(w dt)/w for d = -w^2 < 0 and cosh(w dt), sinh(w dt)/w for
    d = w^2 >= 0 (s -> dt as w -> 0). A fixed cost per call whatever ``dt``; A must be invertible.
    With one matrix per joint on a last axis, the closed form joint by joint (arrays per entry).
    """
    if a.ndim == 3:
        per_joint = [zoh_integral(a[:, :, j], dt) for j in range(a.shape[2])]
        k = a.shape[0]
        return [[np.array([phi[r][c] for phi in per_joint]) for c in range(k)] for r in range(k)]
    n = a.shape[0]
    if n == 1:
        rate = float(a[0, 0])
        return [[math.expm1(rate * dt) / rate]]
    if n != 2:
        raise ValueError(f"zoh_integral: closed form for one or two states, got {n}")
    (a11, a12), (a21, a22) = a.tolist()
    sigma, det = 0.5 * (a11 + a22), a11 * a22 - a12 * a21
    d = sigma * sigma - det
    w = math.sqrt(abs(d))
    if w * dt < 1e-8:
        c, sh = 1.0, dt
    elif d < 0.0:
        c, sh = math.cos(w * dt), math.sin(w * dt) / w
    else:
        c, sh = math.cosh(w * dt), math.sinh(w * dt) / w
    e = math.exp(sigma * dt)
    m11, m12 = e * (c + sh * (a11 - sigma)) - 1.0, e * sh * a12  # exp(A dt) - I
    m21, m22 = e * sh * a21, e * (c + sh * (a22 - sigma)) - 1.0
    return [[(a22 * m11 - a12 * m21) / det, (a22 * m12 - a12 * m22) / det],  # A^-1 by the 2x2 inverse
            [(-a21 * m11 + a11 * m21) / det, (-a21 * m12 + a11 * m22) / det]]


class LawRunner:
    """Runs one law at a fixed or varying tick: output from the current states, then advance them.

    States advance by the exact zero-order-hold solution of z' = A z + w over the tick
    (the measurements and the reference in w held), computed in closed form (:func:`zoh_integral`) so a tick costs
    the same whatever the jitter of the stamps, and kept for the next tick of the same length
    while the gains stay (a fixed-rate loop discretises once). (This keeps the damper's own update
    exact; whether the closed loop is stable at a given rate is a question for the analysis.)
    """

    def __init__(self, law: Law, sample: JointSample, ref=None, previous_torque: float | None = None):
        self.set_law(law)
        self.z = law.initial_state(sample)
        if previous_torque is not None and law.n_states:
            self.z = self._bumpless_state(sample, ref, previous_torque)

    def _bumpless_state(self, s, ref, tau):
        """States that reproduce ``tau`` now: the torque is affine in the first state."""
        z0 = list(self.z)
        t0 = self.law.output(s, ref, tuple(z0))
        z1 = list(z0)
        z1[0] = z1[0] + 1e-3  # a new value: += would change an array state in place
        slope = (self.law.output(s, ref, tuple(z1)) - t0) / 1e-3
        if isinstance(slope, np.ndarray):  # joint by joint: each torque is affine in its own state
            usable = np.isfinite(slope) & (np.abs(slope) >= 1e-9)
            z0[0] = z0[0] + np.where(usable, (tau - t0) / np.where(usable, slope, 1.0), 0.0)
            return tuple(z0)
        if not math.isfinite(slope) or abs(slope) < 1e-9:
            return tuple(z0)
        z0[0] += (tau - t0) / slope
        return tuple(z0)

    def set_law(self, law: Law) -> None:
        """Same law with new gains; states are kept (same number of states)."""
        self.law, self._matrix = law, law.state_matrix()
        self._held_dt = math.nan  # tick length (s) that self._held_zoh is for; NaN: none yet
        self._held_zoh: list = []

    def _discrete(self, dt: float) -> list:
        """Phi of :func:`zoh_integral` over ``dt`` s, reused while ``dt`` and the law stay the same."""
        if dt != self._held_dt:
            self._held_dt, self._held_zoh = dt, zoh_integral(self._matrix, dt)
        return self._held_zoh

    def step(self, s: JointSample, ref, dt: float) -> float:
        """Torque for this tick (N m); advances the law's states by ``dt`` seconds."""
        law, z = self.law, self.z
        tau = law.output(s, ref, z)
        if law.n_states:
            rate = law.state_rate(s, ref, z)
            self.z = tuple(zi + sum(map(mul, row, rate)) for zi, row in zip(z, self._discrete(dt)))  # z + Phi z'
        return tau
