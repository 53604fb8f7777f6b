"""The simulated robot stepped one state period at a time (the simulated joint node's core, no ROS).

One stepper for both kinds of robot a ``config.SimSetup`` describes, chosen by its links:

* the built-in bench (``dynamics.links.IndependentLinks``): ``bench_plant.advance``, the compiled
  per-joint kernel the offline bench simulator (simulate.simulate) runs;
* a URDF chain (``dynamics.urdf_chain.UrdfChain``): ``dynamics.elastic_chain.ElasticChain`` with
  the setup's floor contact, the plant the offline robot simulator (robot_sim.simulate_robot) runs.

Both integrate with RK4, ``substeps`` per period, the motor torque held over the period, and read
one ``sensors.SensorChannel`` per joint once per period (noise seeded with ``setup.seed``), as the
offline simulators do. External torques are rows ``[joint, t_on, t_off, torque]`` (N m on
[t_on, t_off), s), the scenarios' scripted-torque format, for either robot.
"""
from __future__ import annotations

import dataclasses
import math

import numpy as np

from compliant_damping.dynamics import bench_plant
from compliant_damping.dynamics.elastic_chain import ElasticChain, ElasticElements, PlaneContact
from compliant_damping.dynamics.links import IndependentLinks
from compliant_damping.sim.robot_sim import scripted_torques
from compliant_damping.sim.scenarios import rest_state
from compliant_damping.sim.sensors import SensorChannel

__all__ = ["Plant"]


class _BenchDynamics:
    """Independent bench joints: ``bench_plant``'s compiled kernel on packed model.JointParams."""

    def __init__(self, joints):
        self._params = bench_plant.pack([j.plant for j in joints])

    def spring_torques(self, x: np.ndarray) -> list:
        """tau_s per joint (N m) of the (n, 4) state."""
        return [bench_plant.spring_torque(p, *row) for p, row in zip(self._params, x)]

    def advance(self, x: np.ndarray, tau: np.ndarray, rows: np.ndarray, t0: float, h: float,
                steps: int) -> np.ndarray:
        """``steps`` RK4 steps of ``h`` s from ``t0`` in place; returns the applied torques (N m)."""
        return bench_plant.advance(x, self._params, tau, rows, t0, h, steps)


class _ChainDynamics:
    """Coupled links: ``ElasticChain`` on the links with each joint's drive and the floor, if any."""

    def __init__(self, links, joints, floor: PlaneContact | None):
        elements = ElasticElements.from_joint_params([j.plant for j in joints])
        self._chain = ElasticChain(links, elements, () if floor is None else (floor,))

    def spring_torques(self, x: np.ndarray) -> list:
        return self._chain.spring_torque(x).tolist()

    def advance(self, x: np.ndarray, tau: np.ndarray, rows: np.ndarray, t0: float, h: float,
                steps: int) -> np.ndarray:
        return self._chain.advance(x, tau, scripted_torques(rows, self._chain.n), t0, h, steps)


def _dynamics(links, joints, floor: PlaneContact | None):
    """The integrator for ``links``: the bench kernel for independent joints, the chain otherwise."""
    if isinstance(links, IndependentLinks):
        return _BenchDynamics(joints)
    return _ChainDynamics(links, joints, floor)


class Plant:
    """State of all joints of a ``config.SimSetup``; time ``t = ticks * period`` (s).

    Parameters
    ----------
    setup : config.SimSetup
        Its ``links`` choose the dynamics (module notes); ``contact`` is the floor of a URDF robot.

    Attributes
    ----------
    period : float
        State period 1 / state_rate (s).
    substeps : int
        RK4 steps per period.
    ticks : int
        Periods advanced so far.
    x : ndarray, shape (n, 4)
        True state ``[q, q', theta, theta']`` per joint (rad, rad/s); starts at
        ``scenarios.rest_state(setup.joints, setup.links)``, as the offline scenarios do.
    applied : ndarray, shape (n,)
        Motor torque held over the last period after the driver's saturation (N m).
    external : ndarray, shape (m, 4)
        Pending external torque rows ``[joint, t_on, t_off, torque]`` (s, N m); rows that are over drop out.
    readings : list of control.sample.JointSample
        This period's sensor reading per joint.
    """

    def __init__(self, setup):
        self.period = 1.0 / setup.state_rate
        self.substeps = setup.substeps
        self.ticks = 0
        self._links = setup.links
        self._floor = setup.contact
        self._dynamics = _dynamics(self._links, setup.joints, self._floor)
        self.x = rest_state(setup.joints, setup.links)  # as the offline scenarios start
        self.applied = np.zeros(len(setup.joints))
        self.external = bench_plant.NO_EXTERNAL.copy()
        rng = np.random.default_rng(setup.seed)
        self._sensors = [SensorChannel(j.sensor, self.period, rng) for j in setup.joints]
        self._joints = setup.joints
        self.readings = self._read()
        self._warm_up()

    def _warm_up(self) -> None:
        """One substep on a copy of the state, so numba compiles (or loads from its cache) the
        kernels now: on a fresh install the first period would otherwise stall for seconds, long
        enough for a controller on sim time to see the clock stopped (clock_stopped fault)."""
        self._dynamics.advance(self.x.copy(), np.zeros(len(self.x)), self.external, 0.0,
                               self.period / self.substeps, 1)

    @property
    def t(self) -> float:
        """Plant time (s)."""
        return self.ticks * self.period

    @property
    def floor(self) -> PlaneContact | None:
        """The floor contact (a URDF robot's ``contact.*`` settings, with the height set last); None without one."""
        return self._floor

    def _read(self):
        tau_s = self._dynamics.spring_torques(self.x)
        return [s.read(*row, torque) for s, row, torque in zip(self._sensors, self.x.tolist(), tau_s)]

    def advance(self, torques) -> None:
        """Hold ``torques`` (N m per joint) over one period, then take this period's readings."""
        tau = np.asarray(torques, dtype=float)
        self.applied = self._dynamics.advance(self.x, tau, self.external, self.t, self.period / self.substeps,
                                              self.substeps)
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
        """New drive parameters (config.SimJoint per joint, same joints and order) from the next period.

        Everything of ``joint.plant`` takes effect, the end stops ``stop_lower`` and ``stop_upper``
        (rad) included: this is how the end stops move at run time. The links stay those of the
        setup (a bench joint's link parameters are part of its ``plant`` and change too).
        """
        self._joints = tuple(joints)
        self._dynamics = _dynamics(self._links, self._joints, self._floor)

    def set_floor_height(self, height: float) -> None:
        """Move the floor plane to ``height`` (m along its normal, the ``contact.height`` setting)
        from the next period on.

        The plane jumps there: a frame that ends up inside it is pushed out by the contact's
        spring-damper from the next RK4 step on.

        Raises
        ------
        ValueError
            The robot has no floor (no ``contact.frame``), or ``height`` is not finite.
        """
        if self._floor is None:
            raise ValueError("contact.frame: this robot has no floor to move (name a URDF frame in contact.frame)")
        if not math.isfinite(height):
            raise ValueError(f"contact.height: must be finite, got {height!r} m")
        self._floor = dataclasses.replace(self._floor, height=float(height))
        self._dynamics = _dynamics(self._links, self._joints, self._floor)
