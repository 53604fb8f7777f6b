"""Fixed-step closed-loop simulation: plant (model.py) + controller (law + safety) + sensors.

The controller ticks every ``control_dt`` seconds on the sensor reading; its
torque is held over the tick while the plant takes ``substeps`` RK4 steps.
"""
from __future__ import annotations

import time
from dataclasses import dataclass

import numpy as np

from . import model
from .sensors import SensorChannel


@dataclass
class SimResult:
    """Time series at the control ticks; arrays are (ticks, joints) unless noted.

    ``tau_m`` is the command after the safety filter held over [t, t + dt); the other
    series are the true plant state at ``t`` (s). Units: rad, rad/s, N m.
    """

    joint_names: list
    t: np.ndarray            # (ticks,)
    q: np.ndarray
    dq: np.ndarray
    theta: np.ndarray
    dtheta: np.ndarray
    tau_m: np.ndarray
    tau_s: np.ndarray
    faults: list             # per joint: first fault reason or None
    control_dt: float
    wall_time: float         # s spent simulating

    def series(self, name: str, joint: str) -> np.ndarray:
        return getattr(self, name)[:, self.joint_names.index(joint)]


def simulate(sim_joints, controllers, scenario, duration=None, control_dt=1e-3, substeps=10,
             seed=0, progress=None) -> SimResult:
    """Run ``scenario`` for ``duration`` s (default: the scenario's) and return the time series.

    sim_joints: config.SimJoint per joint (plant + sensor); controllers: one
    controller.JointController per joint; progress: optional callable(ticks done).
    """
    duration = scenario.duration if duration is None else duration
    params = model.pack([j.plant for j in sim_joints])
    rng = np.random.default_rng(seed)
    sensors = [SensorChannel(j.sensor, control_dt, rng) for j in sim_joints]
    x = scenario.initial.astype(float).copy()
    n_ticks, n = int(round(duration / control_dt)), len(sim_joints)
    states, tau_m, tau_s_out = np.empty((n_ticks, n, 4)), np.empty((n_ticks, n)), np.empty((n_ticks, n))
    tau = np.zeros(n)
    h = control_dt / substeps
    # The tick loop works on plain Python floats, with per-joint rows and bound methods looked up once.
    joints = list(zip(params.tolist(), [s.read for s in sensors], [c.step for c in controllers],
                      [r.sample for r in scenario.references]))
    spring_torque, advance, external = model.spring_torque, model.advance, scenario.external
    start = time.perf_counter()
    for i in range(n_ticks):
        t = i * control_dt
        states[i] = x
        for j, ((q, dq, th, dth), (p, read, step, reference)) in enumerate(zip(x.tolist(), joints)):
            tau_s = spring_torque(p, q, dq, th, dth)
            tau[j] = step(read(q, dq, th, dth, tau_s), reference(t), t, control_dt)
            tau_s_out[i, j] = tau_s
        tau_m[i] = advance(x, params, tau, external, t, h, substeps)
        if progress is not None and i % 1000 == 0:
            progress(i)
    wall_time = time.perf_counter() - start
    q, dq, theta, dtheta = (np.ascontiguousarray(states[:, :, c]) for c in range(4))
    return SimResult([j.name for j in sim_joints], np.arange(n_ticks) * control_dt, q, dq, theta, dtheta,
                     tau_m, tau_s_out, faults=[c.fault for c in controllers], control_dt=control_dt,
                     wall_time=wall_time)


def run_metrics(q, theta, tau_m, tick) -> dict:
    """Metrics every run has, simulated or recorded, for one joint (SI units).

    q, theta: link and motor positions (rad) at the state samples; tau_m: motor torque
    commands (N m); tick: time between successive commands (s), a number or one per interval
    (intervals that are not positive are skipped). The torque rate is |delta tau_m| / tick.
    """
    tick = np.broadcast_to(np.asarray(tick, dtype=float), (max(len(tau_m) - 1, 0),))
    ok = tick > 0.0
    rate = np.abs(np.diff(tau_m))[ok] / tick[ok]
    return {
        "peak_abs_torque": float(np.max(np.abs(tau_m))),
        "peak_torque_rate": float(np.max(rate)) if len(rate) else 0.0,
        "max_link_position": float(np.max(q)),
        "min_link_position": float(np.min(q)),
        "final_link_position": float(q[-1]),
        "max_deflection": float(np.max(np.abs(np.asarray(theta) - np.asarray(q)))),
    }


def metrics(result: SimResult, scenario) -> dict:
    """Per-joint summary (SI units; None where a metric does not apply).

    overshoot is a fraction of the step size; settling_time_2pct is measured from the
    step and is the last time the link leaves the band of 2 % of the step around its target;
    both only for the joints the scenario steps.
    """
    out = {}
    for j, name in enumerate(result.joint_names):
        q = result.q[:, j]
        entry = {**run_metrics(q, result.theta[:, j], result.tau_m[:, j], result.control_dt),
                 "overshoot": None, "settling_time_2pct": None}
        if scenario.step is not None and j in scenario.acting:
            t_step, size = scenario.step
            after = result.t >= t_step
            start = scenario.initial[j, 0]
            target = start + size
            excess = (q[after] - target) * np.sign(size)
            entry["overshoot"] = float(max(np.max(excess), 0.0) / abs(size))
            outside = np.nonzero(np.abs(q[after] - target) > 0.02 * abs(size))[0]
            t_after = result.t[after]
            if len(outside) == 0:
                entry["settling_time_2pct"] = 0.0
            elif outside[-1] + 1 < len(t_after):
                entry["settling_time_2pct"] = float(t_after[outside[-1] + 1] - t_step)
        out[name] = entry
    return out
