"""Speed of the multi-joint path, measured side by side in one run (not a test).

1. Before / now, each tree in its own worker process (tick_worker.py, PYTHONPATH set to that
   tree), asked in interleaved rounds (order alternating), medians:
   - controller tick, RobotController.step with decoupled_damper (law with ABA derivatives,
     ZOH of the damper states, a safety filter per joint), for the bundled 3-joint compliant leg
     and a generated 7-joint chain, at this tree and at START (the commit this speed work began
     from), against the 100 us per tick target;
   - real-time factor of the coupled 3-joint leg closed loop (robot_sim.simulate_robot:
     RobotController + ElasticChain with RK4, 1 kHz control / 10 kHz plant), this tree and
     START, against the 20x target;
   - the one-joint bench closed loop (simulate.simulate on config/one_joint.yaml,
     decoupled_damper, JointController on floats) at this tree, START and BASE: no slower.
   The commits are unpacked with ``git archive`` into a temporary folder.
2. At this tree, in this process: the law alone (LawRunner.step) for 1, 3 and 7 joints; where
   the leg closed loop's wall time goes (plant ElasticChain.advance, controller
   RobotController.step, the rest), timed around each call; and what bounds it: one
   ElasticChain.rates call, one RK4 substep, and one Pinocchio ABA call from Python
   (UrdfChain.forward_trusted), which every RK4 stage makes (40 per control tick).

    .venv/bin/python benchmarks/robot_speed.py
"""
from __future__ import annotations

import json
import os
import statistics
import subprocess
import sys
import tempfile
import time
from pathlib import Path

import numpy as np
from tick_worker import BENCH, KNEE, LEG_LOOP, TICKS, chain7, hold, leg, leg_plant, robot

from compliant_damping.control.controller import stack_gains
from compliant_damping.control.law_runner import LawRunner
from compliant_damping.control.laws import ChainNominal, make_law
from compliant_damping.control.sample import JointSample
from compliant_damping.sim.robot_sim import simulate_robot

ROUNDS = 9
START = "13ec718"  # the commit this speed work began from (controller and leg loop before / now)
BASE = "b9b234c"   # the one-joint path may be no slower than here
TICK_TARGET = 100e-6  # s per controller tick, 7 joints
RTF_TARGET = 20.0     # coupled 3-joint closed loop
HERE = Path(__file__).resolve().parent
TREE = HERE.parent


class Worker:
    """A tick_worker.py process on one tree of the package (a folder holding compliant_damping/)."""

    def __init__(self, tree: Path):
        env = dict(os.environ, PYTHONPATH=os.pathsep.join([str(tree), str(HERE)]))
        self.proc = subprocess.Popen([sys.executable, str(HERE / "tick_worker.py")], stdin=subprocess.PIPE,
                                     stdout=subprocess.PIPE, text=True, env=env, cwd=tree)

    def ask(self, cases) -> dict:
        """Seconds per case for one round of ``cases``."""
        self.proc.stdin.write(" ".join(cases) + "\n")
        self.proc.stdin.flush()
        line = self.proc.stdout.readline()
        if not line:
            raise RuntimeError(f"tick worker ended (exit code {self.proc.wait()})")
        return json.loads(line)

    def close(self) -> None:
        self.proc.stdin.close()
        self.proc.wait(timeout=30)


def unpack(commit: str, into: str) -> Path:
    """The package (with config/ and urdf/) at ``commit`` unpacked into a new folder under ``into``."""
    folder = Path(into) / commit
    folder.mkdir()
    archive = subprocess.run(["git", "-C", str(TREE), "archive", commit, "compliant_damping", "config", "urdf"],
                             check=True, capture_output=True).stdout
    subprocess.run(["tar", "-x", "-C", str(folder)], input=archive, check=True)
    return folder


def before_and_now() -> None:
    """Section 1: interleaved rounds over worker processes of this tree, START and BASE."""
    asked = {"now": ("bench", "leg_loop", "robot3", "robot7"), START: ("bench", "leg_loop", "robot3", "robot7"),
             BASE: ("bench",)}
    with tempfile.TemporaryDirectory() as tmp:
        workers = {"now": Worker(TREE), START: Worker(unpack(START, tmp)), BASE: Worker(unpack(BASE, tmp))}
        try:
            for name, w in workers.items():
                w.ask(asked[name])  # warm-up round, not counted
            times = {name: {case: [] for case in cases} for name, cases in asked.items()}
            order = list(workers)
            for r in range(ROUNDS):
                for name in (order if r % 2 == 0 else order[::-1]):
                    for case, value in workers[name].ask(asked[name]).items():
                        times[name][case].append(value)
        finally:
            for w in workers.values():
                w.close()
    def both(fn, fmt: str = ".2f") -> str:
        """Median over the rounds of ``fn(one round's times)``, by wall clock, then by CPU time in brackets
        (a ratio is taken within each round, then its median)."""
        return " ".join(("{:" + fmt + "}" if k == 0 else "({:" + fmt + "})").format(statistics.median(
            fn({name: {case: v[r][k] for case, v in cases.items()} for name, cases in times.items()})
            for r in range(ROUNDS))) for k in (0, 1))

    print(f"before / now, separate processes, median of {ROUNDS} interleaved rounds "
          "(wall clock; CPU time in brackets):")
    print(f"  controller tick, RobotController.step with decoupled_damper (target {TICK_TARGET * 1e6:.0f} us):")
    for c, label in [("robot3", "3 joints (leg)"), ("robot7", "7 joints (chain)")]:
        print(f"    {label:16s} {START} {both(lambda m: m[START][c] * 1e6, '.1f')} us, "
              f"now {both(lambda m: m['now'][c] * 1e6, '.1f')} us: {both(lambda m: m[START][c] / m['now'][c])}x "
              f"faster; now {both(lambda m: m['now'][c] / TICK_TARGET)}x the target")
    print(f"  coupled 3-joint leg closed loop, 1 kHz control / 10 kHz plant, real-time factor: "
          f"{START} {both(lambda m: LEG_LOOP / m[START]['leg_loop'])}x, "
          f"now {both(lambda m: LEG_LOOP / m['now']['leg_loop'])}x, "
          f"{both(lambda m: m[START]['leg_loop'] / m['now']['leg_loop'])}x faster; "
          f"now {both(lambda m: LEG_LOOP / m['now']['leg_loop'] / RTF_TARGET)}x the {RTF_TARGET:.0f}x target")
    print("  one-joint bench closed loop (one_joint.yaml, decoupled_damper, JointController on floats), "
          "per simulated s:")
    print(f"    {BASE} {both(lambda m: m[BASE]['bench'] / BENCH * 1e3, '.1f')} ms, "
          f"{START} {both(lambda m: m[START]['bench'] / BENCH * 1e3, '.1f')} ms, "
          f"now {both(lambda m: m['now']['bench'] / BENCH * 1e3, '.1f')} ms; "
          f"now / {BASE} = {both(lambda m: m['now']['bench'] / m[BASE]['bench'])}, "
          f"now / {START} = {both(lambda m: m['now']['bench'] / m[START]['bench'])}")


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


def law_alone() -> None:
    """Section 2a: LawRunner.step alone, interleaved rounds in this process."""
    bench = make_law("decoupled_damper", KNEE.model, KNEE.gains)
    cases = {"1 joint (bench, floats)": (bench, JointSample(0.1, 0.2, 0.12, 0.1), (0.0, 0.0, 0.0))}
    for label, links in [("3 joints (leg, Pinocchio)", leg()), ("7 joints (chain, Pinocchio)", chain7())]:
        law, n = chain(links)
        cases[label] = (law, JointSample(np.full(n, 0.1), np.full(n, 0.2), np.full(n, 0.12), np.full(n, 0.1)),
                        (np.zeros(n), np.zeros(n), np.zeros(n)))
    times = {k: [] for k in cases}
    for _ in range(ROUNDS):
        for k, (law, s, ref) in cases.items():
            times[k].append(per_tick(law, s, ref))
    base = statistics.median(times["1 joint (bench, floats)"])
    print("now, in this process: the law alone, LawRunner.step with decoupled_damper (median of interleaved rounds):")
    for k, v in times.items():
        m = statistics.median(v)
        print(f"  {k:28s} {m * 1e6:8.1f} us per tick   {m / base:6.1f}x the bench joint")


def leg_loop_split() -> None:
    """Section 2b: where the leg closed loop's time goes, and the plant's floor."""
    links = leg()
    plant, ctrl = Timed(leg_plant(links), "advance"), Timed(robot(links), "step")
    duration = 1.0
    scenario = hold(links, duration)
    simulate_robot(plant, ctrl, scenario, 0.05, 1e-3, 10)  # warm-up (numba, caches)
    plant.spent = ctrl.spent = 0.0
    run = simulate_robot(plant, ctrl, scenario, duration, 1e-3, 10)
    ticks = round(duration / 1e-3)
    print(f"  the leg closed loop, {duration} s at 1 kHz control / 10 kHz plant: real-time factor "
          f"{duration / run.wall_time:.2f}x; where its wall time goes (per control tick, share of the loop):")
    rest = run.wall_time - plant.spent - ctrl.spent
    for label, spent in [("plant, ElasticChain.advance", plant.spent),
                         ("controller, RobotController.step", ctrl.spent), ("rest of the loop", rest)]:
        print(f"    {label:34s} {spent / ticks * 1e6:8.1f} us   {100 * spent / run.wall_time:5.1f} %")
    for label, free in [("plant alone", plant.spent), ("controller alone", ctrl.spent)]:
        print(f"  real-time factor bound with only the {label:16s} {duration / free:8.1f}x")

    x = np.array(scenario.initial)
    tau, zeros = np.full(3, 0.5), np.zeros(3)
    rates = statistics.median(per_call(lambda: plant.inner.rates(x, tau, zeros)) for _ in range(ROUNDS))
    substep = statistics.median(per_call(lambda: plant.inner.advance(x, tau, lambda t: zeros, 0.0, 1e-4, 10), 200) / 10
                                for _ in range(ROUNDS))
    q, dq = np.ascontiguousarray(x[:, 0]), np.ascontiguousarray(x[:, 1])
    aba = statistics.median(per_call(lambda: links.forward_trusted(q, dq, tau)) for _ in range(ROUNDS))
    print(f"  leg plant: {rates * 1e6:.1f} us per ElasticChain.rates call, {substep * 1e6:.1f} us per RK4 substep "
          f"of advance ({substep / rates:.1f} rates calls' worth); Pinocchio's ABA from Python alone "
          f"{aba * 1e6:.1f} us per call, {400 * aba / substep:.0f} % of a substep (4 calls)")
    floor = 40 * aba
    print(f"  what limits the loop: 40 ABA calls per control tick (10 substeps x 4 RK4 stages) cost "
          f"{floor * 1e6:.0f} us "
          f"alone, a real-time factor bound of {1e-3 / floor:.1f}x for the plant's link dynamics with nothing else; "
          f"{RTF_TARGET:.0f}x leaves {1e6 / RTF_TARGET * 1e-3:.0f} us per tick for plant and controller together")


def main() -> None:
    before_and_now()
    law_alone()
    leg_loop_split()


if __name__ == "__main__":
    main()
