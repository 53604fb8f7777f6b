"""Speed of the offline simulator, measured side by side in one run (not a test).

1. Real-time factor (simulated s / wall s) of a 10 s run of the bundled one-joint
   parameter file, scenario ``free_oscillation``, with law ``zero`` and with
   ``decoupled_damper`` (closed loop: sensors, law, safety filter, plant). A short
   warm-up run comes first so numba compilation or cache loading is not timed.
2. The same zero-torque 10 s run as a plain plant problem for scipy's solve_ivp
   (bench_plant.derivative, no controller in the loop), asked for the same output: the state
   at every control tick (t_eval). Accuracy is matched on that whole series: both are
   compared with a tight DOP853 reference (rtol 1e-13, atol 1e-15), the error being the
   largest deviation of any state (rad, rad/s) at any tick. For RK45 and DOP853,
   solve_ivp gets the loosest rtol (atol = rtol/100) whose error is no larger than the
   simulator's; the faster of the two (by CPU time) is set against the simulator (medians).
   The ringing dies out within about a second (friction), after which an adaptive solver
   takes long steps while the simulator keeps its fixed 1 kHz tick: a modest ratio here.

Wall-clock times are what the real-time factor means; the process CPU time is printed
beside them because the machine may be shared (CPU time hardly depends on other load).

Usage: python benchmarks/simulator_speed.py [--repeats N]
"""
from __future__ import annotations

import argparse
import statistics
import time

import numpy as np
from scipy.integrate import solve_ivp

from compliant_damping.control import controller
from compliant_damping.dynamics import bench_plant
from compliant_damping.io import config
from compliant_damping.sim import scenarios, simulate

DURATION = 10.0  # s simulated per timed run
SCENARIO = "free_oscillation"


def setups(law: str):
    """(ControllerSetup, SimSetup) of the bundled one-joint file with ``law``."""
    doc = config.read(config.bundled())
    params = config.node_parameters(doc, config.CONTROLLER_NODE)
    params["law"] = law
    return config.controller_setup(params), config.sim_setup(config.node_parameters(doc, config.SIM_NODE))


def run_simulator(law: str, duration: float):
    """(wall s, CPU s, runs.Run) of one closed-loop run."""
    ctrl, sim = setups(law)
    scenario = scenarios.make(SCENARIO, sim.joints)
    bank = controller.bank(ctrl)
    start, cpu = time.perf_counter(), time.process_time()
    result = simulate.simulate(sim.joints, bank, scenario, duration,
                               control_dt=1.0 / ctrl.control_rate, substeps=sim.substeps, seed=sim.seed)
    return time.perf_counter() - start, time.process_time() - cpu, result


def run_solve_ivp(method: str, rtol: float, atol: float, t_eval):
    """(wall s, CPU s, states (4 n, len(t_eval))) of the zero-torque plant over DURATION s with solve_ivp."""
    _, sim = setups("zero")
    scenario = scenarios.make(SCENARIO, sim.joints)
    params = bench_plant.pack([j.plant for j in sim.joints])
    tau, ext = np.zeros(len(sim.joints)), scenario.external
    shape = scenario.initial.shape

    def rhs(t, y):
        return bench_plant.derivative(params, y.reshape(shape), tau, ext, t).ravel()

    start, cpu = time.perf_counter(), time.process_time()
    sol = solve_ivp(rhs, (0.0, DURATION), scenario.initial.ravel(), method=method, rtol=rtol, atol=atol,
                    t_eval=t_eval)
    wall, cpu = time.perf_counter() - start, time.process_time() - cpu
    assert sol.success, sol.message
    return wall, cpu, sol.y


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--repeats", type=int, default=5, help="timed runs per case (median reported)")
    args = ap.parse_args()

    print(f"bundled one-joint file, scenario {SCENARIO}, {DURATION:.0f} s simulated, "
          f"median of {args.repeats} runs after a warm-up")
    walls, cpus, results = {}, {}, {}
    for law in ("zero", "decoupled_damper"):
        run_simulator(law, 0.1)  # warm-up: numba compile or cache load, law set-up
        runs = [run_simulator(law, DURATION) for _ in range(args.repeats)]
        walls[law] = statistics.median(r[0] for r in runs)
        cpus[law] = statistics.median(r[1] for r in runs)
        print(f"  law {law:<17} real-time factor {DURATION / walls[law]:7.1f}x wall-clock "
              f"({walls[law] * 1e3:.1f} ms per run; {DURATION / cpus[law]:.1f}x by CPU time)")
        results[law] = runs[-1][2]

    result = results["zero"]
    assert not np.any(result.tau_m) and result.faults == (None,), "zero law must leave the plant alone"
    ours = np.stack([result.q, result.dq, result.theta, result.dtheta], axis=2).reshape(len(result.t), -1).T
    *_, reference = run_solve_ivp("DOP853", 1e-13, 1e-15, result.t)
    our_err = float(np.max(np.abs(ours - reference)))
    print(f"  simulator (RK4, 10 kHz plant step): largest error at the {len(result.t)} ticks "
          f"vs DOP853 rtol 1e-13: {our_err:.1e}")

    best = None
    for method in ("RK45", "DOP853"):
        for rtol in (1e-6, 1e-7, 1e-8, 1e-9, 1e-10, 1e-11, 1e-12):
            *_, y = run_solve_ivp(method, rtol, rtol * 1e-2, result.t)
            err = float(np.max(np.abs(y - reference)))
            if err <= our_err:
                runs = [run_solve_ivp(method, rtol, rtol * 1e-2, result.t)
                        for _ in range(max(1, args.repeats // 2))]
                wall, cpu = statistics.median(r[0] for r in runs), statistics.median(r[1] for r in runs)
                print(f"  solve_ivp {method:<6} rtol {rtol:.0e}: largest error {err:.1e}, "
                      f"{wall * 1e3:.0f} ms per run ({cpu * 1e3:.0f} ms CPU)")
                if best is None or cpu < best[1]:
                    best = (wall, cpu, method, rtol)
                break
        else:
            print(f"  solve_ivp {method:<6}: no rtol down to 1e-12 reaches the simulator's accuracy")
    if best is not None:
        wall, cpu, method, rtol = best
        print(f"  speed ratio, law zero vs solve_ivp {method} rtol {rtol:.0e} at matching accuracy: "
              f"{wall / walls['zero']:.1f}x faster by wall-clock, {cpu / cpus['zero']:.1f}x by CPU time")


if __name__ == "__main__":
    main()
