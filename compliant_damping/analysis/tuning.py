"""The decoupling-spring trade-off of ``decoupled_damper`` (no ROS).

A soft virtual spring ``k_v`` low-pass filters the damper force, so an end-stop
impact barely moves the motor torque; a stiff one approaches ``link_damping``
and damps free motion better. :func:`sweep_decoupling_stiffness` measures both
sides for a range of ``k_v``: the impact (simulated end_stop_impact, through the
joint's controller with its safety filter) and the least-damped closed-loop
mode (:func:`linear.analyze`). :func:`recommend` picks the softest ``k_v``
that keeps that mode's damping ratio above a threshold and stays inside the
joint's torque and slew limits.
"""
from __future__ import annotations

import dataclasses
from dataclasses import dataclass

import numpy as np

from compliant_damping.analysis import linear
from compliant_damping.control.controller import JointController
from compliant_damping.control.laws import make_law
from compliant_damping.io.metrics import joint_metrics
from compliant_damping.sim import scenarios, simulate

__all__ = ["KvPoint", "sweep_decoupling_stiffness", "recommend", "log_grid"]

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
        Damping ratio of the least-damped closed-loop mode at the set point.
    mode_frequency_hz : float
        Natural frequency of that mode (Hz).
    link_share : float
        Share of the link position in that mode's shape (0..1, see linear.Mode).
    within_limits : bool
        True when neither the torque nor the slew limit was reached during the impact.
    """

    decoupling_stiffness: float
    peak_torque_rate: float
    peak_torque: float
    damping_ratio: float
    mode_frequency_hz: float
    link_share: float
    within_limits: bool


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
        res = linear.analyze(sim_joint.plant, make_law(LAW, ctrl_joint.model, gains), sim_joint.initial_position)
        mode = res.least_damped
        # reaching a limit within 0.1 % counts as hitting it (the filter clips exactly at it)
        inside = m.peak_abs_torque < 0.999 * lim.torque and m.peak_torque_rate < 0.999 * lim.torque_rate
        out.append(KvPoint(float(kv), m.peak_torque_rate, m.peak_abs_torque, mode.damping_ratio,
                           mode.frequency_hz, mode.link_share, bool(inside and ctrl.fault is None)))
        if progress is not None:
            progress(kv)
    return out


def recommend(points, min_damping_ratio: float = 0.4):
    """Softest point with damping ratio >= ``min_damping_ratio`` and within the limits, or None.

    The default 0.4 is common practice for a well-damped positioning loop (about 25 %
    step overshoot for a pure second-order pair, much less with the damper's real pole).
    """
    ok = [p for p in points if p.damping_ratio >= min_damping_ratio and p.within_limits]
    return min(ok, key=lambda p: p.decoupling_stiffness) if ok else None


def log_grid(lowest: float, highest: float, count: int) -> np.ndarray:
    """``count`` log-spaced k_v values from ``lowest`` to ``highest`` (N m/rad)."""
    if not 0.0 < lowest < highest or count < 2:
        raise ValueError(f"kv range: need 0 < lowest < highest and count >= 2 (got {lowest}, {highest}, {count})")
    return np.logspace(np.log10(lowest), np.log10(highest), count)
