"""Running a law tick by tick: the torque from the current states, then the states advanced by the
exact zero-order-hold solution over the tick (closed form, :func:`zoh`), and bumpless starts."""
from __future__ import annotations

import math
from operator import mul

import numpy as np

from compliant_damping.control.laws import Law
from compliant_damping.control.sample import JointSample

__all__ = ["LawRunner", "zoh"]


def zoh(a: np.ndarray, b: np.ndarray, dt: float) -> tuple:
    """Exact zero-order-hold discretisation of z' = A z + b u over ``dt`` s, in closed form.

    Returns (Ad, bd) as nested lists with Ad = exp(A dt) and bd = A^-1 (Ad - I) b. One state:
    ``Ad = exp(a dt)``, ``bd = b (exp(a dt) - 1) / a``. Two states (Cayley-Hamilton, e.g. Chen,
    Linear System Theory and Design, on functions of a square matrix): with sigma = tr(A)/2
    and d = sigma^2 - det(A), ``exp(A dt) = e^(sigma dt) (c I + s (A - sigma I))`` where
    c, s = cos(w dt), sin(w dt)/w for d = -w^2 < 0 and cosh(w dt), sinh(w dt)/w for d = w^2 >= 0
    (s -> dt as w -> 0). A fixed cost per call whatever ``dt``; A must be invertible.
    """
    if a.ndim == 3:  # one system per joint on the last axis: the closed form joint by joint
        per_joint = [zoh(a[:, :, j], b[:, j], dt) for j in range(a.shape[2])]
        k = a.shape[0]
        return ([[np.array([ad[r][c] for ad, _ in per_joint]) for c in range(k)] for r in range(k)],
                [np.array([bd[r] for _, bd in per_joint]) for r in range(k)])
    n = a.shape[0]
    if n == 1:
        rate = float(a[0, 0])
        decay = math.exp(rate * dt)
        return [[decay]], [float(b[0]) * math.expm1(rate * dt) / rate]
    if n != 2:
        raise ValueError(f"zoh: closed form for one or two states, got {n}")
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
    ad = [[e * (c + sh * (a11 - sigma)), e * sh * a12], [e * sh * a21, e * (c + sh * (a22 - sigma))]]
    m1, m2 = ad[0][0] - 1.0, ad[1][1] - 1.0   # (Ad - I) b, then A^-1 by the 2x2 inverse
    v1, v2 = m1 * b[0] + ad[0][1] * b[1], ad[1][0] * b[0] + m2 * b[1]
    return ad, [(a22 * v1 - a12 * v2) / det, (-a21 * v1 + a11 * v2) / det]


class LawRunner:
    """Runs one law at a fixed or varying tick: output from the current states, then advance them.

    States advance by the exact zero-order-hold solution of z' = A z + b q over the tick
    (the measured link position held), computed in closed form (:func:`zoh`) so a tick costs
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
        self.law, self._matrices = law, law.state_matrices()
        self._held_dt = math.nan  # tick length (s) that self._held_zoh is for; NaN: none yet
        self._held_zoh: tuple = ()

    def _discrete(self, dt: float) -> tuple:
        """(Ad, bd) of :func:`zoh` over ``dt`` s, reused while ``dt`` and the law stay the same."""
        if dt != self._held_dt:
            self._held_dt, self._held_zoh = dt, zoh(*self._matrices, dt)
        return self._held_zoh

    def step(self, s: JointSample, ref, dt: float) -> float:
        """Torque for this tick (N m); advances the law's states by ``dt`` seconds."""
        tau = self.law.output(s, ref, self.z)
        if self.law.n_states:
            ad, bd = self._discrete(dt)
            z = self.z
            self.z = tuple(sum(map(mul, row, z)) + b * s.q for row, b in zip(ad, bd))  # Ad z + bd q
        return tau
