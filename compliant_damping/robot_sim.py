"""Fixed-step closed loop of a robot with coupled links: elastic chain plant + robot controller.

The counterpart of simulate.simulate for dynamics.elastic_chain.ElasticChain and
controller.RobotController: the controller ticks every ``control_dt`` s on the readings, its
torques are held over the tick while the plant takes ``substeps`` RK4 steps. Readings are the
true state (ideal sensors). The result is the same simulate.SimResult every command uses.
"""
from __future__ import annotations

import time

import numpy as np

from .sample import JointSample, Reference
from .simulate import SimResult

__all__ = ["simulate_robot"]


def simulate_robot(plant, controller, references, x0: np.ndarray, duration: float, control_dt: float = 1e-3,
                   substeps: int = 10, external=None, joint_names=None) -> SimResult:
    """Run the closed loop for ``duration`` s from the (n, 4) state ``x0``.

    Parameters
    ----------
    plant : dynamics.elastic_chain.ElasticChain
    controller : controller.RobotController
    references : sequence
        One reference per joint (references.py: ``sample(t)`` gives q_d, q_d', q_d'').
    x0 : ndarray, shape (n, 4)
        Initial ``[q, q', theta, theta']`` per joint (rad, rad/s).
    external : callable, optional
        ``external(t)`` scripted link torques (N m, length n); none by default.
    """
    n = plant.n
    zeros = np.zeros(n)
    external = external or (lambda t: zeros)
    names = list(joint_names or controller.joint_names)
    x = np.array(x0, dtype=float)
    ticks = int(round(duration / control_dt))
    states, tau_m, tau_s_out = np.empty((ticks, n, 4)), np.empty((ticks, n)), np.empty((ticks, n))
    h = control_dt / substeps
    start = time.perf_counter()
    for i in range(ticks):
        t = i * control_dt
        states[i] = x
        tau_s = plant.spring_torque(x)
        readings = [JointSample(*x[j], tau_s[j]) for j in range(n)]
        ref = Reference(*(np.array(column) for column in zip(*(r.sample(t) for r in references))))
        tau = controller.step(readings, ref, t, control_dt)
        tau_m[i] = plant.advance(x, tau, external, t, h, substeps)
        tau_s_out[i] = tau_s
    wall = time.perf_counter() - start
    q, dq, theta, dtheta = (np.ascontiguousarray(states[:, :, c]) for c in range(4))
    return SimResult(names, np.arange(ticks) * control_dt, q, dq, theta, dtheta, tau_m, tau_s_out,
                     faults=controller.faults, control_dt=control_dt, wall_time=wall)
