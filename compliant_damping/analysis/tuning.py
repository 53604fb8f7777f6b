"""The decoupling-spring trade-off of ``decoupled_damper`` (no ROS).

A soft virtual spring ``k_v`` low-pass filters the damper force, so an end-stop
impact barely moves the motor torque; a stiff one approaches ``link_damping``
and damps free motion better. :func:`sweep_decoupling_stiffness` measures both
sides for a range of ``k_v``: the impact (simulated end_stop_impact, through the
joint's controller with its safety filter) and the least-damped mode of the loop
that runs, sampled at the control rate (:func:`sampled.analyze_joint`); the
continuous view (:func:`linear.analyze`) is kept beside it. A stiff ``k_v`` makes
the sampled loop unstable well before the continuous one: :func:`recommend` picks the
softest ``k_v`` whose sampled loop is stable, keeps the least-damped mode's damping
ratio above a threshold and stays inside the joint's torque and slew limits;
:func:`first_unstable` and :func:`stability_boundary` locate where the sampled loop
loses stability.
"""
from __future__ import annotations

import dataclasses
import math
from dataclasses import dataclass

import numpy as np

from compliant_damping.analysis import linear, sampled
from compliant_damping.control.controller import JointController
from compliant_damping.control.laws import make_law
from compliant_damping.io.metrics import joint_metrics
from compliant_damping.sim import scenarios, simulate

__all__ = ["KvPoint", "sweep_decoupling_stiffness", "sampled_loop", "recommend", "first_unstable",
           "stability_boundary", "log_grid"]

LAW = "decoupled_damper"


@dataclass(frozen=True)
class KvPoint:
    """One k_v of the sweep.

    Attributes
    ----------
    decoupling_stiffness : float
        k_v (N m/rad).
    peak_torque_rate : float
        Largest |d tau_m/dt| over the end-stop impact run, after the safety filter (N m/s).
    peak_torque : float
        Largest |tau_m| over that run (N m).
    damping_ratio : float
        Equivalent damping ratio of the least-damped mode of the sampled loop at the set point
        (sampled.SampledMode; negative when the mode grows).
    mode_frequency_hz : float
        Equivalent natural frequency of that mode (Hz).
    link_share : float
        Share of the link position in that mode's shape (0..1, see sampled.SampledMode).
    within_limits : bool
        True when neither the torque nor the slew limit was reached during the impact.
    stable : bool
        The sampled loop at the control rate is stable (every |z| < 1).
    spectral_radius : float
        Largest |z| of the sampled loop's one-period map.
    continuous_damping_ratio : float
        The continuous view: damping ratio of the continuous loop's least-damped mode (linear.analyze).
    """

    decoupling_stiffness: float
    peak_torque_rate: float
    peak_torque: float
    damping_ratio: float
    mode_frequency_hz: float
    link_share: float
    within_limits: bool
    stable: bool
    spectral_radius: float
    continuous_damping_ratio: float


def sweep_decoupling_stiffness(ctrl_joint, sim_joint, stiffnesses, *, control_dt=1e-3, substeps=10,
                               progress=None) -> list:
    """Measure the impact torque and free-motion damping of ``decoupled_damper`` for each k_v.

    Parameters
    ----------
    ctrl_joint : config.ControllerJoint
        Nominal model, gains (k_v is replaced) and limits of the joint.
    sim_joint : config.SimJoint
        The simulated joint (plant, sensor, initial position = analysis set point).
    stiffnesses : iterable of float
        k_v values to try (N m/rad).
    control_dt : float
        Control tick (s); substeps: plant RK4 steps per tick.
    progress : callable or None
        Called with each finished k_v (e.g. a progress bar's update).

    Returns
    -------
    list of KvPoint, in the order of ``stiffnesses``.
    """
    scenario = scenarios.make("end_stop_impact", [sim_joint])
    lim = ctrl_joint.limits
    out = []
    for kv in stiffnesses:
        gains = dataclasses.replace(ctrl_joint.gains, decoupling_stiffness=float(kv))
        ctrl = JointController(LAW, ctrl_joint.model, gains, lim, period=control_dt)
        run = simulate.simulate([sim_joint], [ctrl], scenario, control_dt=control_dt, substeps=substeps)
        m = joint_metrics(run, scenario)[sim_joint.name]
        law = make_law(LAW, ctrl_joint.model, gains)
        res = sampled_loop(law, sim_joint, control_dt, substeps)
        cont = linear.analyze(sim_joint.plant, law, sim_joint.initial_position)
        mode = res.least_damped
        # reaching a limit within 0.1 % counts as hitting it (the filter clips exactly at it)
        inside = m.peak_abs_torque < 0.999 * lim.torque and m.peak_torque_rate < 0.999 * lim.torque_rate
        out.append(KvPoint(float(kv), m.peak_torque_rate, m.peak_abs_torque, mode.damping_ratio,
                           mode.frequency_hz, mode.link_share, bool(inside and ctrl.fault is None), res.stable,
                           res.spectral_radius, cont.least_damped.damping_ratio))
        if progress is not None:
            progress(kv)
    return out


def sampled_loop(law, sim_joint, control_dt: float, substeps: int) -> sampled.SampledAnalysis:
    """The sampled loop of ``law`` on ``sim_joint`` at its initial position (the analysis set point),
    ``control_dt`` s per tick, the sensor's delay in whole ticks."""
    return sampled.analyze_joint(sim_joint.plant, law, sim_joint.initial_position, control_dt=control_dt,
                                 substeps=substeps, delay=sampled.delay_ticks(sim_joint.sensor.delay, control_dt))


def recommend(points, min_damping_ratio: float = 0.4):
    """Softest point whose sampled loop is stable, with damping ratio >= ``min_damping_ratio``
    and within the limits, or None. An unstable point is never recommended.

    The default 0.4 is common practice for a well-damped positioning loop (about 25 %
    step overshoot for a pure second-order pair, much less with the damper's real pole).
    """
    ok = [p for p in points if p.stable and p.damping_ratio >= min_damping_ratio and p.within_limits]
    return min(ok, key=lambda p: p.decoupling_stiffness) if ok else None


def first_unstable(points):
    """The softest point whose sampled loop is unstable, or None when every point is stable."""
    bad = [p for p in points if not p.stable]
    return min(bad, key=lambda p: p.decoupling_stiffness) if bad else None


def stability_boundary(ctrl_joint, sim_joint, stable_kv: float, unstable_kv: float, *, control_dt=1e-3,
                       substeps=10, rel_tol: float = 1e-3) -> float:
    """k_v (N m/rad) where the sampled loop's spectral radius crosses 1, bisected in log k_v.

    Parameters
    ----------
    ctrl_joint, sim_joint, control_dt, substeps :
        As :func:`sweep_decoupling_stiffness`.
    stable_kv, unstable_kv : float
        A bracket (N m/rad): the sampled loop is stable at the first and unstable at the second
        (either order of size).
    rel_tol : float
        Relative width of the final bracket.

    Returns
    -------
    float
        The unstable end of the final bracket: the sampled loop is unstable there and stable
        ``rel_tol`` (relative) towards ``stable_kv``.

    Raises
    ------
    ValueError
        When the bracket does not hold a stable and an unstable end.
    """
    def is_stable(kv):
        gains = dataclasses.replace(ctrl_joint.gains, decoupling_stiffness=float(kv))
        return sampled_loop(make_law(LAW, ctrl_joint.model, gains), sim_joint, control_dt, substeps).stable

    if not (is_stable(stable_kv) and not is_stable(unstable_kv)):
        raise ValueError(f"kv bracket: the sampled loop must be stable at {stable_kv} and unstable at {unstable_kv}")
    good, bad = float(stable_kv), float(unstable_kv)
    while abs(bad - good) > rel_tol * min(good, bad):
        mid = math.sqrt(good * bad)
        if is_stable(mid):
            good = mid
        else:
            bad = mid
    return bad


def log_grid(lowest: float, highest: float, count: int) -> np.ndarray:
    """``count`` log-spaced k_v values from ``lowest`` to ``highest`` (N m/rad)."""
    if not 0.0 < lowest < highest or count < 2:
        raise ValueError(f"kv range: need 0 < lowest < highest and count >= 2 (got {lowest}, {highest}, {count})")
    return np.logspace(np.log10(lowest), np.log10(highest), count)
