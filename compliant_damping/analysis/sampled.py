"""Linear analysis of the SAMPLED closed loop: the one-period map of the code that runs (no ROS).

The controller ticks every ``T = control_dt`` s: it reads the (possibly delayed) joint state,
computes the torque with ``law_runner.LawRunner.step`` (output from the current law states, then the
exact zero-order-hold update of those states), and the plant takes ``substeps`` RK4 steps with
that torque held (``bench_plant.advance`` for bench joints, ``ElasticChain.advance`` for a
chain). One period is therefore a map ``v_{k+1} = F(v_k)`` of

    v = (plant state stacked by quantity: q, q', theta, theta' per joint; the law's states;
         the plant states of the last D ticks, D the longest sensor delay in whole ticks)

built here from those same functions, so its eigenvalues are those of the implementation. The
continuous equilibrium (analysis/linear.py, analysis/robot_linear.py) is a fixed point of ``F``
(zero plant rates hold under RK4, the law's z' = 0 holds under its ZOH); :func:`sampled_map`
checks that and raises :class:`linear.AnalysisError` otherwise. As in the continuous analysis
Coulomb friction is off (its smoothed slope at rest is no real viscous term; see analysis/linear.py),
end stops, contacts and the driver saturation are inactive at the equilibrium, the safety filter
(limits and slew) is inactive for small deviations from rest, and sensor noise and encoder
quantisation are left out (a delay is kept: it is linear).

Definitions: the map's eigenvalues ``z`` decide; the loop is stable iff every ``|z| < 1``. Each
``z`` has the equivalent continuous pole ``s = ln(z) / T`` (principal logarithm, so
``|Im s| <= pi / T``: a negative real ``z`` is an oscillation at the Nyquist frequency), with
natural frequency ``|s|`` and damping ratio ``-Re(s) / |s|`` (negative when ``|z| > 1``). A mode is
a real ``z`` or a conjugate pair (upper member kept). The *dominant* mode has the largest ``|z|``
(slowest decay), the *least-damped* the smallest damping ratio. ``z = 0`` (a dead-beat state) has
an infinite natural frequency and damping ratio 1.

Public API: :func:`sampled_map`, :func:`analyze_joint`, :func:`analyze_robot`, :func:`delay_ticks`,
and the result classes :class:`SampledMap`, :class:`SampledMode`, :class:`SampledAnalysis`.
"""
from __future__ import annotations

import cmath
import dataclasses
import math
from dataclasses import dataclass

import numpy as np

from compliant_damping.analysis import linear, robot_linear
from compliant_damping.analysis.linear import AnalysisError, central_jacobian
from compliant_damping.control.law_runner import LawRunner
from compliant_damping.control.laws import Law
from compliant_damping.control.sample import JointSample, Reference
from compliant_damping.dynamics import bench_plant

__all__ = ["SampledMap", "SampledMode", "SampledAnalysis", "delay_ticks", "sampled_map", "analyze_joint",
           "analyze_robot", "modes_of_map"]

FIXED_POINT_TOLERANCE = 1e-9  # |F(v0) - v0|, rad and rad/s: what rounding leaves of a fixed point


@dataclass(frozen=True)
class SampledMap:
    """The linearised one-period map ``dv_{k+1} = jacobian dv_k`` around ``fixed_point``.

    Attributes
    ----------
    jacobian : ndarray, shape (N, N)
        dF/dv at the fixed point (dimensionless entries, and s or 1/s between positions and speeds).
    fixed_point : ndarray, shape (N,)
        The continuous equilibrium, extended by the delay line's copies of the plant state.
    fixed_point_residual : float
        ``max |F(v0) - v0|`` (rad, rad/s): rounding only, checked below FIXED_POINT_TOLERANCE.
    joints : int
        n; rows 0..n-1 are q, n..2n-1 q', 2n..3n-1 theta, 3n..4n-1 theta', then the law's
        states (n rows each; the decoupled laws' first one is the damper position x), then the
        delay line (4n rows per tick, newest first).
    law_states : int
        Law states per joint.
    delay_ticks : tuple of int
        Sensor delay of each joint in whole control ticks.
    period : float
        Control period T (s).
    substeps : int
        RK4 steps of the plant per period.
    """

    jacobian: np.ndarray
    fixed_point: np.ndarray
    fixed_point_residual: float
    joints: int
    law_states: int
    delay_ticks: tuple
    period: float
    substeps: int


@dataclass(frozen=True)
class SampledMode:
    """One mode of the sampled loop: a real eigenvalue or a conjugate pair (upper member kept).

    Attributes
    ----------
    z : complex
        Eigenvalue of the one-period map; ``z.imag >= 0``.
    magnitude : float
        ``|z|``: the mode shrinks by this factor per period; stable iff below 1.
    natural_frequency : float
        ``|s|`` of the equivalent continuous pole ``s = ln(z) / T`` (rad/s; inf for z = 0).
    damping_ratio : float
        ``-Re(s) / |s|``: negative when the mode grows.
    link_share : float
        Share of the link positions in the mode's shape, ``||v_q|| / ||(v_q, v_theta, v_x)||`` over the
        eigenvector's present position entries (x: the damper position, when the law has one), 0..1.
    joint_shares : ndarray, shape (n,)
        ``|v_q,j| / ||v_q||`` per joint (0..1, squares sum to 1; zeros without link motion).
    """

    z: complex
    magnitude: float
    natural_frequency: float
    damping_ratio: float
    link_share: float
    joint_shares: np.ndarray

    @property
    def frequency_hz(self) -> float:
        """Equivalent natural frequency (Hz)."""
        return self.natural_frequency / (2.0 * math.pi)

    @property
    def stable(self) -> bool:
        """True when ``|z| < 1``."""
        return self.magnitude < 1.0


@dataclass(frozen=True)
class SampledAnalysis:
    """Result of :func:`analyze_joint` and :func:`analyze_robot`.

    Attributes
    ----------
    law : str
    eigenvalues : ndarray of complex
        All eigenvalues z of the one-period map, largest ``|z|`` first.
    modes : tuple of SampledMode
        One per real eigenvalue or conjugate pair, sorted by equivalent natural frequency.
    dominant : SampledMode
        Largest ``|z|``: the slowest-decaying (or fastest-growing) mode.
    least_damped : SampledMode
        Smallest equivalent damping ratio.
    map : SampledMap
    """

    law: str
    eigenvalues: np.ndarray
    modes: tuple
    dominant: SampledMode
    least_damped: SampledMode
    map: SampledMap

    @property
    def control_rate(self) -> float:
        """1 / T (Hz)."""
        return 1.0 / self.map.period

    @property
    def spectral_radius(self) -> float:
        """max |z| (dimensionless)."""
        return float(np.max(np.abs(self.eigenvalues)))

    @property
    def stable(self) -> bool:
        """True when every eigenvalue lies inside the unit circle: this verdict decides."""
        return self.spectral_radius < 1.0


def delay_ticks(delay: float, control_dt: float) -> int:
    """A sensor delay (s) in whole ticks of ``control_dt`` s, rounded as sim/sensors.SensorChannel does."""
    return int(round(delay / control_dt))


def _period_map(n: int, law: Law, q_d, advance, spring_torque, delays: tuple, control_dt: float, scalar: bool):
    """F(v) -> v of one control period: read (delayed), LawRunner.step, advance the plant, shift the delay line.

    advance(x, tau): the plant's RK4 substeps over the period in place, ``x`` of shape (n, 4);
    spring_torque(x): tau_s per joint (N m), the reading's torque. ``scalar``: the law works on
    floats (a bench joint) rather than arrays (a chain).
    """
    depth = max(delays)
    ref = Reference(q_d) if scalar else Reference(q_d, np.zeros(n), np.zeros(n))
    nz = law.n_states
    rows = np.arange(n)
    lag = np.asarray(delays)

    def to_states(v):
        z = v[4 * n:4 * n + nz * n]
        return tuple(float(s) for s in z) if scalar else tuple(z.reshape(nz, n))

    x0 = np.zeros((n, 4))
    runner = LawRunner(law, JointSample(*(x0[0] if scalar else x0.T)))

    def step(v):
        v = np.asarray(v, dtype=float)
        x = np.ascontiguousarray(v[:4 * n].reshape(4, n).T)
        history = np.concatenate([x[None], v[4 * n + nz * n:].reshape(depth, 4, n).transpose(0, 2, 1)])
        seen = history[lag, rows]  # (n, 4): joint j as read d_j ticks ago
        tau_s = spring_torque(seen)
        reading = (JointSample(*(float(c) for c in seen[0]), float(tau_s[0])) if scalar
                   else JointSample(*seen.T, tau_s))
        runner.z = to_states(v)
        tau = runner.step(reading, ref, control_dt)
        advance(x, np.atleast_1d(np.asarray(tau, dtype=float)))
        z = np.asarray(runner.z, dtype=float).ravel() if nz else np.zeros(0)
        line = history[:depth].transpose(0, 2, 1).ravel()
        return np.concatenate([x.T.ravel(), z, line])

    return step


def _check_fixed_point(step, v0: np.ndarray) -> float:
    residual = float(np.max(np.abs(step(v0) - v0)))
    if not residual <= FIXED_POINT_TOLERANCE:
        raise AnalysisError(f"the continuous equilibrium is no fixed point of the sampled loop "
                            f"(|F(v0) - v0| = {residual:.3g}): the law's hold or the plant step is inconsistent")
    return residual


def sampled_map(step, equilibrium: np.ndarray, n: int, law: Law, delays: tuple, control_dt: float, substeps: int,
                rel_step: float = 1e-6) -> SampledMap:
    """Linearise the one-period map ``step`` at the continuous ``equilibrium`` (plant + law states).

    Parameters
    ----------
    step : callable
        v -> F(v), one control period (built by :func:`analyze_joint` / :func:`analyze_robot`).
    equilibrium : ndarray
        Continuous closed-loop equilibrium ``(q, q', theta, theta' stacked by quantity, law states)``.
    n : int
        Joints.
    law : laws.Law
    delays : tuple of int
        Sensor delay per joint (whole ticks).
    control_dt : float
        T (s).
    substeps : int
    rel_step : float
        Central-difference step relative to ``max(1, |v_i|)`` (linear.central_jacobian).

    Returns
    -------
    SampledMap

    Raises
    ------
    AnalysisError
        When the equilibrium is not a fixed point of ``step``.
    """
    plant_part = np.asarray(equilibrium[:4 * n], dtype=float)
    v0 = np.concatenate([np.asarray(equilibrium, dtype=float), np.tile(plant_part, max(delays))])
    residual = _check_fixed_point(step, v0)
    return SampledMap(central_jacobian(step, v0, rel_step), v0, residual, n, law.n_states, tuple(delays),
                      control_dt, substeps)


def _mode(z: complex, vec: np.ndarray, smap: SampledMap) -> SampledMode:
    n = smap.joints
    mag = abs(z)
    if mag == 0.0:
        wn, zeta = math.inf, 1.0
    else:
        s = cmath.log(z) / smap.period
        wn = abs(s)
        zeta = -s.real / wn if wn > 0.0 else 1.0
    q = np.abs(vec[:n])
    positions = [vec[:n], vec[2 * n:3 * n]] + ([vec[4 * n:5 * n]] if smap.law_states else [])
    total = float(np.linalg.norm(np.concatenate(positions)))
    q_norm = float(np.linalg.norm(q))
    return SampledMode(complex(z.real, abs(z.imag)), float(mag), float(wn), float(zeta),
                       q_norm / total if total > 0.0 else 0.0, q / q_norm if q_norm > 0.0 else np.zeros(n))


def modes_of_map(smap: SampledMap, tol: float = 1e-9) -> tuple:
    """Modes of the linearised map (one per real eigenvalue or conjugate pair), sorted by natural frequency."""
    zs, vecs = np.linalg.eig(smap.jacobian)
    modes = [_mode(complex(z), v, smap) for z, v in zip(zs, vecs.T) if z.imag >= -tol * max(1.0, abs(z))]
    return tuple(sorted(modes, key=lambda m: m.natural_frequency))


def _analysis(law: Law, smap: SampledMap) -> SampledAnalysis:
    zs = np.linalg.eigvals(smap.jacobian)
    zs = zs[np.argsort(-np.abs(zs), kind="stable")]
    modes = modes_of_map(smap)
    return SampledAnalysis(law.name, zs, modes, max(modes, key=lambda m: m.magnitude),
                           min(modes, key=lambda m: m.damping_ratio), smap)


def analyze_joint(plant: bench_plant.JointParams, law: Law, q_d: float = 0.0, *, control_dt: float = 1e-3,
                  substeps: int = 10, delay: int = 0, rel_step: float = 1e-6) -> SampledAnalysis:
    """Sampled closed loop of one bench joint (bench_plant.advance + LawRunner.step) at the set point ``q_d``.

    Parameters
    ----------
    plant : bench_plant.JointParams
        The simulated joint; its Coulomb friction is switched off (module notes).
    law : laws.Law
        Built with its nominal model and gains (``laws.make_law``).
    q_d : float
        Constant link set point (rad), between the end stops.
    control_dt : float
        Control period T (s): 1 / control_rate of the parameter file.
    substeps : int
        RK4 steps of the plant per period (the simulated joint's ``substeps``).
    delay : int
        Sensor delay in whole ticks (:func:`delay_ticks` of the sensor's delay).
    rel_step : float
        Central-difference step (relative).

    Returns
    -------
    SampledAnalysis

    Raises
    ------
    AnalysisError
        No equilibrium near ``q_d``, or it is no fixed point of the sampled loop.
    """
    plant = dataclasses.replace(plant, motor_coulomb=0.0)
    equilibrium = linear.linearize(plant, law, q_d).equilibrium
    params = bench_plant.pack([plant])
    h = control_dt / substeps

    def advance(x, tau):
        bench_plant.advance(x, params, tau, bench_plant.NO_EXTERNAL, 0.0, h, substeps)

    p = params[0].tolist()

    def spring_torque(x):
        return np.array([bench_plant.spring_torque(p, *x[0])])

    step = _period_map(1, law, q_d, advance, spring_torque, (int(delay),), control_dt, scalar=True)
    return _analysis(law, sampled_map(step, equilibrium, 1, law, (int(delay),), control_dt, substeps, rel_step))


def analyze_robot(plant, law: Law, q_d, *, control_dt: float = 1e-3, substeps: int = 10, delays=None,
                  rel_step: float = 1e-6) -> SampledAnalysis:
    """Sampled closed loop of a robot with coupled links (ElasticChain.advance + LawRunner.step) at ``q_d``.

    Parameters
    ----------
    plant : dynamics.elastic_chain.ElasticChain
        The simulated robot; its Coulomb friction is switched off (module notes).
    law : laws.Law
        On a laws.ChainNominal with per-joint gains (arrays).
    q_d : array-like, shape (n,)
        Constant link set points (rad).
    control_dt, substeps :
        As :func:`analyze_joint`.
    delays : sequence of int, optional
        Sensor delay per joint in whole ticks (default: none).
    rel_step : float

    Returns
    -------
    SampledAnalysis
    """
    q_d = np.asarray(q_d, dtype=float)
    n = plant.n
    plant = type(plant)(plant.links, dataclasses.replace(plant.e, motor_coulomb=0.0 * plant.e.motor_coulomb),
                        plant.contacts)
    delays = tuple(int(d) for d in (delays if delays is not None else [0] * n))
    equilibrium = robot_linear.linearize_robot(plant, law, q_d).equilibrium
    h = control_dt / substeps
    no_torque = np.zeros(n)

    def advance(x, tau):
        plant.advance(x, tau, lambda _t: no_torque, 0.0, h, substeps)

    step = _period_map(n, law, q_d, advance, plant.spring_torque, delays, control_dt, scalar=False)
    return _analysis(law, sampled_map(step, equilibrium, n, law, delays, control_dt, substeps, rel_step))
