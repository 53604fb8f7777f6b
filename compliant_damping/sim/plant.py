"""Simulated joints stepped one state period at a time (the simulated joint node's core, no ROS).

Same pieces as the offline simulator: ``bench_plant.advance`` (RK4, ``substeps`` per period,
torque held over the period) and one ``sensors.SensorChannel`` per joint read once per
period. External torques are rows ``[joint, t_on, t_off, torque]`` of ``bench_plant.advance``.
"""
from __future__ import annotations

import math

import numpy as np

from compliant_damping.dynamics import bench_plant
from compliant_damping.sim.scenarios import rest_state
from compliant_damping.sim.sensors import SensorChannel

__all__ = ["Plant"]


class Plant:
    """State of all joints of a ``config.SimSetup``; time ``t = ticks * period`` (s)."""

    def __init__(self, setup):
        self.period = 1.0 / setup.state_rate
        self.substeps = setup.substeps
        self.ticks = 0
        self.params = bench_plant.pack([j.plant for j in setup.joints])
        self.x = rest_state(setup.joints)  # as the offline scenarios start
        self.applied = np.zeros(len(setup.joints))  # torque held over the last period (N m)
        self.external = bench_plant.NO_EXTERNAL.copy()
        rng = np.random.default_rng(setup.seed)
        self._sensors = [SensorChannel(j.sensor, self.period, rng) for j in setup.joints]
        self.readings = self._read()

    @property
    def t(self) -> float:
        return self.ticks * self.period

    def _read(self):
        out = []
        for p, s, (q, dq, th, dth) in zip(self.params, self._sensors, self.x):
            out.append(s.read(q, dq, th, dth, bench_plant.spring_torque(p, q, dq, th, dth)))
        return out

    def advance(self, torques) -> None:
        """Hold ``torques`` (N m per joint) over one period, then take this period's readings."""
        tau = np.asarray(torques, dtype=float)
        self.applied = bench_plant.advance(self.x, self.params, tau, self.external, self.t,
                                           self.period / self.substeps, self.substeps)
        self.ticks += 1
        self.external = self.external[self.external[:, 2] > self.t]
        self.readings = self._read()

    def hold_torque(self, joint: int, torque: float, start: float) -> None:
        """Constant external torque (N m) on the link from ``start`` (s) on; the previous one ends then."""
        held = (self.external[:, 0] == joint) & np.isinf(self.external[:, 2])
        self.external[held, 2] = max(start, self.t)
        self.external = np.vstack([self.external, [[joint, start, math.inf, torque]]])

    def add_impulse(self, joint: int, impulse: float, start: float) -> None:
        """Angular impulse (N m s) on the link as a one-period pulse from ``start`` (s)."""
        row = [[joint, start, start + self.period, impulse / self.period]]
        self.external = np.vstack([self.external, row])

    def set_joints(self, joints) -> None:
        """New plant parameters (config.SimJoint per joint, same joints) from the next period."""
        self.params = bench_plant.pack([j.plant for j in joints])
