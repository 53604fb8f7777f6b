"""Fixed-step closed-loop simulation: plant (bench_plant.py) + controller (law + safety) + sensors.

The controller ticks every ``control_dt`` seconds on the sensor reading; its
torque is held over the tick while the plant takes ``substeps`` RK4 steps.
"""
from __future__ import annotations

import time

import numpy as np

from compliant_damping.control.laws import check_reference
from compliant_damping.dynamics import bench_plant
from compliant_damping.io.runs import Run
from compliant_damping.sim.sensors import SensorChannel

__all__ = ["simulate"]


def simulate(sim_joints, controllers, scenario, duration=None, control_dt=1e-3, substeps=10,
             seed=0, progress=None) -> Run:
    """Run ``scenario`` for ``duration`` s (default: the scenario's) and return it as a runs.Run.

    sim_joints: config.SimJoint per joint (plant + sensor); controllers: one
    controller.JointController per joint; progress: optional callable(ticks done). A reference
    the joint's law cannot follow raises ValueError with the reason (laws.check_reference).
    """
    for c, reference in zip(controllers, scenario.references):
        check_reference(c.law_name, reference)
    duration = scenario.duration if duration is None else duration
    params = bench_plant.pack([j.plant for j in sim_joints])
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
    spring_torque, advance, external = bench_plant.spring_torque, bench_plant.advance, scenario.external
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
    return Run.simulated([j.name for j in sim_joints], control_dt, states, tau_m, tau_s_out,
                         [c.fault for c in controllers], wall_time)
