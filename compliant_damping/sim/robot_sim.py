"""Fixed-step closed loop of a robot with coupled links: elastic chain plant + robot controller.

The counterpart of simulate.simulate for dynamics.elastic_chain.ElasticChain and
controller.RobotController: the controller ticks every ``control_dt`` s on the sensor readings,
its torques are held over the tick while the plant takes ``substeps`` RK4 steps. The result is
the same runs.Run every command uses.
"""
from __future__ import annotations

import bisect
import time
from dataclasses import dataclass

import numpy as np

from compliant_damping.control.laws import check_reference
from compliant_damping.control.sample import JointSample, stack_references
from compliant_damping.dynamics.elastic_chain import ElasticChain, ElasticElements
from compliant_damping.io.runs import Run
from compliant_damping.sim.sensors import SensorChannel

__all__ = ["Touchdown", "robot_plant", "scripted_torques", "simulate_robot", "touchdown"]


def robot_plant(sim, scenario=None) -> ElasticChain:
    """The simulated robot of a config.SimSetup with the contacts of ``scenario`` (default: the file's floor)."""
    contacts = scenario.contacts if scenario is not None else (() if sim.contact is None else (sim.contact,))
    return ElasticChain(sim.links, ElasticElements.from_joint_params([j.plant for j in sim.joints]), contacts)


def scripted_torques(rows: np.ndarray, n: int):
    """``external(t)``: link torques (N m, length n) of scenario rows ``[joint, t_on, t_off, torque]``, on [t_on, t_off).

    The torques are piecewise constant between the rows' switching times, so each piece is summed
    once here and ``external(t)`` looks its piece up (the plant asks once per RK4 step).
    The arrays it returns are shared and read-only.
    """
    rows = np.asarray(rows, dtype=float).reshape(-1, 4)
    joints = rows[:, 0].astype(int)

    def summed(t: float) -> np.ndarray:
        on = (rows[:, 1] <= t) & (t < rows[:, 2])
        return np.bincount(joints[on], weights=rows[on, 3], minlength=n).astype(float)

    switches = sorted(set(rows[:, 1:3].ravel().tolist()))
    pieces = [np.zeros(n)] + [summed(t) for t in switches]  # before the first switch, then from each one on
    for piece in pieces:
        piece.flags.writeable = False

    def external(t: float) -> np.ndarray:
        return pieces[bisect.bisect_right(switches, t)]
    return external


def simulate_robot(plant, controller, scenario, duration: float | None = None, control_dt: float = 1e-3,
                   substeps: int = 10, sensors=None, seed: int = 0, joint_names=None) -> Run:
    """Run ``scenario`` for ``duration`` s (default: the scenario's) and return it as a runs.Run.

    Parameters
    ----------
    plant : dynamics.elastic_chain.ElasticChain
        With the scenario's contacts (:func:`robot_plant`).
    controller : controller.RobotController
    scenario : scenarios.Scenario
        Start state, one reference per joint, scripted link torques.
    sensors : sequence of model.SensorParams, optional
        Per joint (config.SimJoint.sensor), noise seeded with ``seed``; ideal sensors (the true state)
        by default.

    Raises
    ------
    ValueError
        A reference the law cannot follow, with the reason (laws.check_reference).
    """
    for reference in scenario.references:
        check_reference(controller.law_name, reference)
    duration = scenario.duration if duration is None else duration
    n = plant.n
    rng = np.random.default_rng(seed)
    reads = None if sensors is None else [SensorChannel(p, control_dt, rng).read for p in sensors]
    external = scripted_torques(scenario.external, n)
    names = list(joint_names or controller.joint_names)
    x = np.array(scenario.initial, dtype=float)
    ticks = int(round(duration / control_dt))
    states, tau_m, tau_s_out = np.empty((ticks, n, 4)), np.empty((ticks, n)), np.empty((ticks, n))
    h = control_dt / substeps
    start = time.perf_counter()
    for i in range(ticks):
        t = i * control_dt
        states[i] = x
        tau_s = plant.spring_torque(x)
        rows = [(*row, torque) for row, torque in zip(x.tolist(), tau_s.tolist())]  # Python floats per joint
        readings = [JointSample(*r) for r in rows] if reads is None else [read(*r) for read, r in zip(reads, rows)]
        ref = stack_references([r.sample(t) for r in scenario.references])
        tau = controller.step(readings, ref, t, control_dt)
        tau_m[i] = plant.advance(x, tau, external, t, h, substeps)
        tau_s_out[i] = tau_s
    wall = time.perf_counter() - start
    return Run.simulated(names, control_dt, states, tau_m, tau_s_out, controller.faults, wall)


@dataclass(frozen=True)
class Touchdown:
    """How a contact's frame met its plane."""

    time: float   # s: first control tick with the frame inside the plane
    speed: float  # m/s: approach speed h'(t) - n . v at the tick before, the last one still free


def touchdown(run: Run, links, contact) -> Touchdown | None:
    """When and how fast ``contact``'s frame first met its plane in ``run``; None if it never
    did or was inside it from the start."""
    for i, t in enumerate(run.t):
        if contact.depth(links, run.q[i], t) > 0.0:
            if i == 0:
                return None
            t0, q0, dq0 = run.t[i - 1], run.q[i - 1], run.dq[i - 1]
            return Touchdown(float(t), contact.speed_at(t0) - float(contact.normal_row(links, q0) @ dq0))
    return None
