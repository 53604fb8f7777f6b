"""Per-joint metrics of a run (runs.Run), the one summary every command reports. No ROS here."""
from __future__ import annotations

import dataclasses
from dataclasses import dataclass

import numpy as np

from compliant_damping.io.runs import Run

__all__ = ["JointMetrics", "STEP_FIELDS", "TRACKING_FIELDS", "SETTLING_BAND", "joint_metrics", "to_dicts"]

STEP_FIELDS = ("overshoot", "settling_time_2pct")
TRACKING_FIELDS = ("tracking_rms", "tracking_peak")
SETTLING_BAND = 0.02  # fraction of the step size: the 2 % band, common practice


@dataclass(frozen=True)
class JointMetrics:
    """Summary of one joint's run (SI units).

    Attributes
    ----------
    peak_abs_torque : float
        Largest |tau_m| (N m).
    peak_torque_rate : float
        Largest |delta tau_m| / delta t between successive commands (N m/s); 0 with a single command.
    max_link_position, min_link_position, final_link_position : float
        Range and last value of the link position q (rad).
    max_deflection : float
        Largest spring deflection |theta - q| (rad).
    overshoot : float or None
        Largest excursion past the target after a set-point step, as a fraction of the step size;
        None when the run is not a step response.
    settling_time_2pct : float or None
        Time from the step until the link last enters the band of 2 % of the step around its target (s);
        None when the run is not a step response or never settles.
    tracking_rms, tracking_peak : float or None
        RMS and largest |q - q_d| over the run (rad) on a tracking scenario (scenarios.TRACKING),
        q_d sampled at the state times; None otherwise.
    """

    peak_abs_torque: float
    peak_torque_rate: float
    max_link_position: float
    min_link_position: float
    final_link_position: float
    max_deflection: float
    overshoot: float | None = None
    settling_time_2pct: float | None = None
    tracking_rms: float | None = None
    tracking_peak: float | None = None

    def to_dict(self, step: bool = True) -> dict:
        """The fields as a JSON-ready dict, in declaration order; ``step=False`` leaves out STEP_FIELDS
        and TRACKING_FIELDS (a recording without its scenario has neither)."""
        return {k: v for k, v in dataclasses.asdict(self).items()
                if step or k not in STEP_FIELDS + TRACKING_FIELDS}


def _step_response(t, q, t_step: float, start: float, size: float) -> dict:
    """overshoot and settling_time_2pct of link positions ``q`` (rad) at ``t`` (s) after a step of ``size`` rad."""
    after = t >= t_step
    target = start + size
    excess = (q[after] - target) * np.sign(size)
    outside = np.nonzero(np.abs(q[after] - target) > SETTLING_BAND * abs(size))[0]
    t_after = t[after]
    settling = None
    if len(outside) == 0:
        settling = 0.0
    elif outside[-1] + 1 < len(t_after):
        settling = float(t_after[outside[-1] + 1] - t_step)
    return {"overshoot": float(max(np.max(excess), 0.0) / abs(size)), "settling_time_2pct": settling}


def joint_metrics(run: Run, scenario=None) -> dict:
    """JointMetrics per joint name of ``run``, in the run's joint order.

    Parameters
    ----------
    run : runs.Run
        States and commands on their own time bases; the torque rate uses the command times.
    scenario : scenarios.Scenario, optional
        The scenario that produced the run; with a set-point step (``scenario.step``) the step
        fields are measured from the step time and the initial positions of the joints it steps;
        on a tracking scenario (``scenario.tracking``) the tracking fields against its references.

    Raises
    ------
    ValueError
        When the run has no state or no command samples.
    """
    if len(run.t) == 0 or len(run.t_cmd) == 0:
        raise ValueError(f"run {run.source}: {len(run.t)} state and {len(run.t_cmd)} command samples; "
                         "metrics need at least one of each")
    dt_cmd = np.diff(run.t_cmd)
    positive = dt_cmd > 0.0  # repeated stamps carry no rate
    out = {}
    for j, name in enumerate(run.joint_names):
        q, tau = run.q[:, j], run.tau_m[:, j]
        rate = np.abs(np.diff(tau))[positive] / dt_cmd[positive]
        extra = {}
        if scenario is not None and scenario.step is not None and j in scenario.acting:
            t_step, size = scenario.step
            extra = _step_response(run.t, q, t_step, float(scenario.initial[j, 0]), size)
        if scenario is not None and scenario.tracking:
            error = q - np.array([scenario.references[j].sample(t).q for t in run.t.tolist()])
            extra = {"tracking_rms": float(np.sqrt(np.mean(error**2))), "tracking_peak": float(np.max(np.abs(error)))}
        out[name] = JointMetrics(
            peak_abs_torque=float(np.max(np.abs(tau))),
            peak_torque_rate=float(np.max(rate)) if len(rate) else 0.0,
            max_link_position=float(np.max(q)),
            min_link_position=float(np.min(q)),
            final_link_position=float(q[-1]),
            max_deflection=float(np.max(np.abs(run.theta[:, j] - q))),
            **extra)
    return out


def to_dicts(by_joint: dict, step: bool = True) -> dict:
    """``{joint: JointMetrics.to_dict(step)}`` of a :func:`joint_metrics` result, for JSON."""
    return {name: m.to_dict(step) for name, m in by_joint.items()}
