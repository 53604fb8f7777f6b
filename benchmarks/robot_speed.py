"""Speed of the multi-joint path, measured side by side in one run (not a test).

1. Law cost per tick (decoupled_damper, LawRunner.step: output with ABA and its derivatives,
   closed-form ZOH of the damper states) for the bench knee as one joint (floats), the bundled
   3-joint compliant leg and a generated 7-joint chain (Pinocchio), in microseconds and as ratios.
2. Real-time factor of the coupled closed loop (robot_sim.simulate_robot: RobotController +
   ElasticChain with RK4) for the 3-joint leg at 1 kHz control / 10 kHz plant, against the
   bench simulator (simulate.simulate) of one joint, and where its wall time goes: the plant
   (ElasticChain.advance), the controller (RobotController.step, law and safety filters) and
   the rest of the loop (readings, references, logging), timed around each call in the same run.
3. Cost of one ElasticChain.rates call (the public one) and of one RK4 substep of advance for
   the leg, in microseconds, beside the floor of the plant: one Pinocchio ABA call from Python
   (UrdfChain.forward_trusted), which every RK4 stage makes.

    .venv/bin/python benchmarks/robot_speed.py
"""
from __future__ import annotations

import dataclasses
import statistics
import time

import numpy as np

from compliant_damping import config, controller, scenarios, simulate
from compliant_damping.controller import RobotController, stack_gains
from compliant_damping.dynamics import UrdfChain, bundled_urdf
from compliant_damping.dynamics.elastic_chain import ElasticChain, ElasticElements
from compliant_damping.laws import ChainNominal, LawRunner, make_law
from compliant_damping.references import Constant
from compliant_damping.robot_sim import simulate_robot
from compliant_damping.sample import JointSample
from link_dynamics_cost import seven_joint_urdf

TICKS, ROUNDS = 2000, 5
CTRL, SIM = config.load(config.bundled())
KNEE = CTRL.joints[0]


def chain(links):
    n = links.n
    nominal = ChainNominal(links, np.full(n, KNEE.model.motor_inertia), np.full(n, KNEE.model.spring_stiffness))
    return make_law("decoupled_damper", nominal, stack_gains([KNEE.gains] * n)), n


def per_tick(law, sample, ref) -> float:
    runner = LawRunner(law, sample, ref)
    start = time.perf_counter()
    for _ in range(TICKS):
        runner.step(sample, ref, 1e-3)
    return (time.perf_counter() - start) / TICKS


class Timed:
    """``obj`` with the wall time (s) of its method ``name`` summed in ``spent``; other attributes pass through."""

    def __init__(self, obj, name: str):
        self.inner, self.spent = obj, 0.0
        method = getattr(obj, name)

        def timed(*args, **kwargs):
            start = time.perf_counter()
            try:
                return method(*args, **kwargs)
            finally:
                self.spent += time.perf_counter() - start

        setattr(self, name, timed)

    def __getattr__(self, attr):
        return getattr(self.inner, attr)


def per_call(fn, calls: int = 2000) -> float:
    """Mean wall time of ``fn()`` (s) over ``calls`` calls."""
    start = time.perf_counter()
    for _ in range(calls):
        fn()
    return (time.perf_counter() - start) / calls


def main() -> None:
    bench = make_law("decoupled_damper", KNEE.model, KNEE.gains)
    cases = {"1 joint (bench, floats)": (bench, JointSample(0.1, 0.2, 0.12, 0.1), (0.0, 0.0, 0.0))}
    for label, links in [("3 joints (leg, Pinocchio)", UrdfChain.from_file(bundled_urdf("compliant_leg.urdf"),
                                                                           ["hip_pitch", "knee_pitch", "ankle_pitch"])),
                         ("7 joints (chain, Pinocchio)", UrdfChain(seven_joint_urdf(), [f"j{i}" for i in range(7)]))]:
        law, n = chain(links)
        cases[label] = (law, JointSample(np.full(n, 0.1), np.full(n, 0.2), np.full(n, 0.12), np.full(n, 0.1)),
                        (np.zeros(n), np.zeros(n), np.zeros(n)))
    times = {k: [] for k in cases}
    for _ in range(ROUNDS):
        for k, (law, s, ref) in cases.items():
            times[k].append(per_tick(law, s, ref))
    base = statistics.median(times["1 joint (bench, floats)"])
    print("law tick, decoupled_damper (median of interleaved rounds):")
    for k, v in times.items():
        m = statistics.median(v)
        print(f"  {k:28s} {m * 1e6:8.1f} us per tick   {m / base:6.1f}x the bench joint")

    leg = UrdfChain.from_file(bundled_urdf("compliant_leg.urdf"), ["hip_pitch", "knee_pitch", "ankle_pitch"])
    plant = Timed(ElasticChain(leg, ElasticElements.from_joint_params([SIM.joints[0].plant] * 3)), "advance")
    nominal = ChainNominal(leg, np.full(3, KNEE.model.motor_inertia), np.full(3, KNEE.model.spring_stiffness))
    q0 = np.array([0.2, -0.3, 0.1])
    x0 = np.stack([q0, np.zeros(3), q0 + leg.gravity(q0) / KNEE.model.spring_stiffness, np.zeros(3)], axis=1)
    duration = 1.0
    robot = Timed(RobotController("decoupled_damper", nominal, [KNEE.gains] * 3, [dataclasses.replace(
        KNEE.limits, position_lower=-2.0, position_upper=2.0)] * 3, ["h", "k", "a"], period=1e-3), "step")
    hold = scenarios.Scenario("hold", duration, x0, tuple(Constant(float(q)) for q in q0), np.zeros((0, 4)))
    simulate_robot(plant, robot, hold, 0.05, 1e-3, 10)  # warm-up (numba, caches)
    plant.spent = robot.spent = 0.0
    run = simulate_robot(plant, robot, hold, duration, 1e-3, 10)
    ctrl = dataclasses.replace(CTRL, law="decoupled_damper")
    simulate.simulate(SIM.joints, controller.bank(ctrl), scenarios.make("free_oscillation", SIM.joints), 0.1)  # warm-up
    one = simulate.simulate(SIM.joints, controller.bank(ctrl), scenarios.make("free_oscillation", SIM.joints),
                            duration, control_dt=1e-3, substeps=10)
    print(f"closed loop, 1 kHz control / 10 kHz plant, {duration} s: 3-joint leg real-time factor "
          f"{duration / run.wall_time:.2f}x; bench joint {duration / one.wall_time:.1f}x "
          f"(ratio {run.wall_time / one.wall_time:.0f}x slower per simulated second)")
    rest = run.wall_time - plant.spent - robot.spent
    ticks = round(duration / 1e-3)
    print("  where the leg's wall time goes (per control tick, share of the loop):")
    for label, spent in [("plant, ElasticChain.advance", plant.spent), ("controller, RobotController.step",
                                                                        robot.spent), ("rest of the loop", rest)]:
        print(f"    {label:34s} {spent / ticks * 1e6:8.1f} us   {100 * spent / run.wall_time:5.1f} %")
    for label, free in [("plant alone", plant.spent), ("controller alone", robot.spent)]:
        print(f"  real-time factor bound with only the {label:16s} {duration / free:8.1f}x")

    x = np.array(x0)
    tau, zeros = np.full(3, 0.5), np.zeros(3)
    rates = statistics.median(per_call(lambda: plant.inner.rates(x, tau, zeros)) for _ in range(ROUNDS))
    substep = statistics.median(per_call(lambda: plant.inner.advance(x, tau, lambda t: zeros, 0.0, 1e-4, 10), 200) / 10
                                for _ in range(ROUNDS))
    q, dq = np.ascontiguousarray(x[:, 0]), np.ascontiguousarray(x[:, 1])
    aba = statistics.median(per_call(lambda: leg.forward_trusted(q, dq, tau)) for _ in range(ROUNDS))
    print(f"leg plant: {rates * 1e6:.1f} us per ElasticChain.rates call, {substep * 1e6:.1f} us per RK4 substep "
          f"of advance ({substep / rates:.1f} rates calls' worth); Pinocchio's ABA from Python alone "
          f"{aba * 1e6:.1f} us per call, {400 * aba / substep:.0f} % of a substep (4 calls)")

if __name__ == "__main__":
    main()
