"""Timing worker of robot_speed.py: runs in its own process against one tree of the package.

robot_speed.py starts one worker per tree (this one, and the commits it compares with) with
PYTHONPATH set to that tree, then asks each in turn, interleaved, for one round of
measurements: it writes a line naming the cases, the worker answers with one JSON line of
seconds per case. Only interfaces that every compared commit has are used here.

Cases:

Each case answers [wall s, CPU s]:

``bench``
    Time of a BENCH s closed loop of the bundled one-joint file (simulate.simulate,
    decoupled_damper, scenario free_oscillation, 1 kHz control, 10 plant substeps).
``leg_loop``
    Time of LEG_LOOP s of the 3-joint leg's closed loop (robot_sim.simulate_robot, 1 kHz
    control, 10 RK4 plant substeps per tick).
``robot3``, ``robot7``
    Time of one RobotController.step (decoupled_damper, per-joint safety filters) on the
    bundled 3-joint leg or the generated 7-joint chain, mean over TICKS ticks.

    python benchmarks/tick_worker.py     (then write e.g. ``bench robot3`` on stdin)

A case is built and run once (warm-up) on its first request.
"""
from __future__ import annotations

import dataclasses
import importlib
import json
import sys
import time
from pathlib import Path

import numpy as np
from link_dynamics_cost import seven_joint_urdf

import compliant_damping
from compliant_damping.dynamics import UrdfChain, bundled_urdf
from compliant_damping.dynamics.elastic_chain import ElasticChain, ElasticElements

LAYERED = (Path(compliant_damping.__file__).parent / "control").is_dir()  # this tree has the layer packages


def _module(path: str):
    """The package's module ``path`` in its layer (``control.laws``), or, in a compared commit from
    before the layers, the flat module of the same last name (``laws``)."""
    return importlib.import_module(f"compliant_damping.{path if LAYERED else path.rpartition('.')[2]}")


config, controller = _module("io.config"), _module("control.controller")
scenarios, simulate = _module("sim.scenarios"), _module("sim.simulate")
RobotController, ChainNominal = controller.RobotController, _module("control.laws").ChainNominal
Constant, simulate_robot = _module("control.references").Constant, _module("sim.robot_sim").simulate_robot
JointSample, Reference = _module("control.sample").JointSample, _module("control.sample").Reference

TICKS = 2000
LEG_LOOP = 0.5  # s simulated per leg closed-loop run
BENCH = 2.0     # s simulated per one-joint closed-loop run
CTRL, SIM = config.load(config.bundled())
KNEE = CTRL.joints[0]


def robot(links) -> RobotController:
    """decoupled_damper with the bench knee's drive, gains and limits (positions within +-2 rad) on every joint."""
    n = links.n
    nominal = ChainNominal(links, np.full(n, KNEE.model.motor_inertia), np.full(n, KNEE.model.spring_stiffness))
    limits = dataclasses.replace(KNEE.limits, position_lower=-2.0, position_upper=2.0)
    return RobotController("decoupled_damper", nominal, [KNEE.gains] * n, [limits] * n,
                           [f"joint_{i}" for i in range(n)], period=1e-3)


class RobotTicks:
    """Ticks one RobotController on a fixed reading, stamp time running on."""

    def __init__(self, links):
        self.ctrl = robot(links)
        n = links.n
        self.readings = [JointSample(0.1, 0.2, 0.12, 0.1)] * n
        self.ref = Reference(np.zeros(n), np.zeros(n), np.zeros(n))
        self.t = 0.0
        self()  # first tick: law built, bumpless start

    def __call__(self) -> list:
        """Mean [wall, CPU] time (s) of one step over TICKS ticks."""
        return spent(self._ticks, TICKS)

    def _ticks(self) -> None:
        for _ in range(TICKS):
            self.t += 1e-3
            self.ctrl.step(self.readings, self.ref, self.t, 1e-3)


def spent(fn, calls: int = 1) -> list:
    """[wall, CPU] time (s) of ``fn()``, divided by ``calls``: wall time is what a real-time factor
    means, this process's CPU time hardly depends on the other load of a shared machine."""
    wall, cpu = time.perf_counter(), time.process_time()
    fn()
    return [(time.perf_counter() - wall) / calls, (time.process_time() - cpu) / calls]


def bench() -> list:
    """[wall, CPU] time (s) of BENCH s of the one-joint closed loop."""
    ctrl = dataclasses.replace(CTRL, law="decoupled_damper")
    scenario = scenarios.make("free_oscillation", SIM.joints)
    bank = controller.bank(ctrl)
    return spent(lambda: simulate.simulate(SIM.joints, bank, scenario, BENCH, control_dt=1e-3, substeps=10))


def leg() -> UrdfChain:
    """The bundled 3-joint compliant leg."""
    return UrdfChain.from_file(bundled_urdf("compliant_leg.urdf"), ["hip_pitch", "knee_pitch", "ankle_pitch"])


def chain7() -> UrdfChain:
    """The generated 7-joint spatial chain."""
    return UrdfChain(seven_joint_urdf(), [f"j{i}" for i in range(7)])


def leg_plant(links) -> ElasticChain:
    """The leg's links with the bench knee's simulated drive on every joint."""
    return ElasticChain(links, ElasticElements.from_joint_params([SIM.joints[0].plant] * links.n))


def hold(links, duration: float) -> scenarios.Scenario:
    """``duration`` s holding q0 = (0.2, -0.3, 0.1) rad from rest there (springs wound against gravity)."""
    q0 = np.array([0.2, -0.3, 0.1])
    x0 = np.stack([q0, np.zeros(3), q0 + links.gravity(q0) / KNEE.model.spring_stiffness, np.zeros(3)], axis=1)
    return scenarios.Scenario("hold", duration, x0, tuple(Constant(float(q)) for q in q0), np.zeros((0, 4)))


def leg_loop() -> list:
    """[wall, CPU] time (s) of LEG_LOOP s of the leg's closed loop: robot_sim.simulate_robot,
    RobotController with decoupled_damper holding the start, ElasticChain plant with the bench
    knee's drive, RK4."""
    links = leg()
    plant, ctrl, scenario = leg_plant(links), robot(links), hold(links, LEG_LOOP)
    return spent(lambda: simulate_robot(plant, ctrl, scenario, LEG_LOOP, 1e-3, 10))


def main() -> None:
    makers = {"bench": lambda: bench, "leg_loop": lambda: leg_loop, "robot3": lambda: RobotTicks(leg()),
              "robot7": lambda: RobotTicks(chain7())}
    cases = {}  # built on first request: a commit need only have the interfaces of the cases asked of it
    for line in sys.stdin:
        for name in line.split():
            if name not in cases:
                cases[name] = makers[name]()
                cases[name]()  # warm-up: numba compilation or cache load, first ticks
        print(json.dumps({name: cases[name]() for name in line.split()}), flush=True)


if __name__ == "__main__":
    main()
