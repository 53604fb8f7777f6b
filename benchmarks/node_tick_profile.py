"""Where a joint state's time goes inside the controller node, in-process, no DDS round trip (not a test).

Builds the controller node (configured and activated, parameters as node_latency.py gives them)
and the echo node in this process, then calls their joint-state callbacks directly with the
robot's states, stamped 1 ms apart, as node_latency.py sends them. Timed side by side in one
run: ``--rounds`` interleaved rounds of ``--ticks`` calls each, medians; the controller's callback
includes its publishes (nobody subscribes) and its law tick. An empty executor pass over each node
(spin_once with zero timeout, nothing ready) is timed the same way: the rclpy executor's cost per
wake-up, which grows with the node's subscriptions, timers and services. Python's garbage
collections during the timed calls are counted and timed, and a full collection is timed. Then one more pass of the
controller's callback under cProfile: cumulative time per tick of the callback's parts and the
functions with the most own time.

Needs the loopback environment of node_latency.py (its nodes exist, though nothing talks to them).

    python benchmarks/node_tick_profile.py [--robots chain7] [--ticks 2000] [--rounds 5] [--top 15]
"""
from __future__ import annotations

import argparse
import cProfile
import gc
import pstats
import statistics
import sys
import tempfile
import time
from pathlib import Path

import numpy as np
import rclpy
from rclpy.executors import SingleThreadedExecutor
from latency_robots import LAW, ROBOTS, make_robots
from node_latency import WATCHDOG_TIMEOUT, EchoNode

from compliant_damping import demo
from compliant_damping.nodes.controller_node import ControllerNode

DEPTH, SHOWN = 4, 0.03  # levels of callees printed under the callback; the smallest share printed


def per_call(callback, msgs, info) -> float:
    """Seconds per ``callback`` call over ``msgs``."""
    start = time.perf_counter()
    for msg in msgs:
        callback(msg, info) if info is not None else callback(msg)
    return (time.perf_counter() - start) / len(msgs)


def per_pass(node, passes: int) -> float:
    """Seconds per executor pass over ``node`` with nothing to do (spin_once with zero timeout): the
    wait set built from every subscription, timer and service of the node, waited on, found empty."""
    executor = SingleThreadedExecutor()
    executor.add_node(node)
    start = time.perf_counter()
    for _ in range(passes):
        executor.spin_once(timeout_sec=0.0)
    spent = (time.perf_counter() - start) / passes
    executor.remove_node(node)
    return spent


class GcTimes:
    """Python's garbage collections (count and longest, per generation) from construction to stop()."""

    def __init__(self):
        self.spent, self._start = {0: [], 1: [], 2: []}, 0.0
        gc.callbacks.append(self._on_gc)

    def _on_gc(self, phase, info):
        if phase == "start":
            self._start = time.perf_counter()
        else:
            self.spent[info["generation"]].append(time.perf_counter() - self._start)

    def stop(self):
        gc.callbacks.remove(self._on_gc)

    def __str__(self):
        return "; ".join(f"generation {g} {len(t)} times, longest {max(t, default=0.0) * 1e3:.1f} ms"
                         for g, t in self.spent.items()) + " during the timed calls"


class Stream:
    """Joint states of ``robot`` stamped one period apart, continuing across batches."""

    def __init__(self, robot, seed: int = 0):
        self.robot, self.rng, self.slot = robot, np.random.default_rng(seed), 0
        self.period_ns = round(1e9 / robot.control_rate)

    def batch(self, n: int) -> list:
        msgs = []
        for _ in range(n):
            self.slot += 1
            msgs.append(self.robot.state(self.rng, self.slot * self.period_ns))
        return msgs


def profile(robot, args, folder: Path) -> None:
    ns = f"/cdamp_profile_{robot.name}"
    path = robot.controller_file(ns, folder / f"{robot.name}.yaml", {"law": LAW, "watchdog_timeout": WATCHDOG_TIMEOUT})
    rclpy.init(args=["--ros-args", "--params-file", str(path)])
    try:
        ctrl, echo = ControllerNode(namespace=ns), EchoNode()
        ctrl.trigger_configure()
        ctrl.trigger_activate()
        stream, info = Stream(robot), {}
        per_call(ctrl._on_state, stream.batch(args.ticks), info)  # warm-up: first tick, caches
        per_call(echo._on_state, stream.batch(args.ticks), None)
        times = {"echo": [], "controller": []}
        collections = GcTimes()
        for _ in range(args.rounds):  # interleaved, so drifts of the shared machine hit both
            times["echo"].append(per_call(echo._on_state, stream.batch(args.ticks), None))
            times["controller"].append(per_call(ctrl._on_state, stream.batch(args.ticks), info))
        collections.stop()
        passes = {"echo": [], "controller": []}
        for _ in range(args.rounds):
            passes["echo"].append(per_pass(echo, args.ticks))
            passes["controller"].append(per_pass(ctrl, args.ticks))
        faults = [f for f in ctrl.bank.faults if f is not None]
        if faults:
            sys.exit(f"node_tick_profile: the controller faulted: {faults[0]}")
        med = {kind: statistics.median(t) for kind, t in times.items()}
        print(f"{robot.name}: joint-state callback per call, median of {args.rounds} rounds of {args.ticks} "
              f"(range over rounds): echo {med['echo'] * 1e6:.1f} us "
              f"({min(times['echo']) * 1e6:.1f}-{max(times['echo']) * 1e6:.1f}), "
              f"controller {med['controller'] * 1e6:.1f} us "
              f"({min(times['controller']) * 1e6:.1f}-{max(times['controller']) * 1e6:.1f}), "
              f"ratio {med['controller'] / med['echo']:.1f}x")
        empty = {kind: statistics.median(t) for kind, t in passes.items()}
        print(f"  empty executor pass (spin_once, zero timeout), median of {args.rounds} rounds of {args.ticks}: "
              f"echo {empty['echo'] * 1e6:.1f} us, controller {empty['controller'] * 1e6:.1f} us, "
              f"ratio {empty['controller'] / empty['echo']:.1f}x (its node has {entities(ctrl)} entities to wait "
              f"on, the echo's {entities(echo)})")
        full = time.perf_counter()
        gc.collect()
        full = time.perf_counter() - full
        print(f"  garbage collection: {collections}; a full collection now ({len(gc.get_objects())} objects "
              f"tracked) took {full * 1e3:.1f} ms")
        msgs = stream.batch(args.ticks)
        prof = cProfile.Profile()
        prof.enable()
        per_call(ctrl._on_state, msgs, info)
        prof.disable()
        ctrl.trigger_deactivate()
        echo.destroy_node()
        ctrl.destroy_node()
    finally:
        rclpy.try_shutdown()
    stats = pstats.Stats(prof).stats
    root = next(k for k in stats if k[2] == "_on_state" and k[0].endswith("controller_node.py"))
    total = stats[root][3]
    print(f"  under cProfile: {total / args.ticks * 1e6:.0f} us per tick (the profiler's overhead inflates the "
          f"small calls); cumulative time per tick of the callback's callees, {SHOWN:.0%} of the callback and more:")
    tree(stats, root, total, args.ticks, 1)
    print(f"  the {args.top} functions with the most own time, per tick:")
    for func, (_, calls, own, cum, _) in sorted(stats.items(), key=lambda kv: -kv[1][2])[:args.top]:
        print(f"    {own / args.ticks * 1e6:7.1f} us own {cum / args.ticks * 1e6:7.1f} us cum "
              f"{calls / args.ticks:5.1f} calls  {where(func)}")


def entities(node) -> int:
    """Subscriptions, timers, services, clients and waitables (QoS event handlers) of ``node``: what an
    executor pass waits on."""
    return sum(len(list(group)) for group in (node.subscriptions, node.timers, node.services, node.clients,
                                              node.waitables))


def where(func) -> str:
    file, line, name = func
    return f"{name} ({Path(file).parent.name}/{Path(file).name}:{line})" if line else name


def tree(stats, func, total: float, ticks: int, depth: int) -> None:
    """Print the callees of ``func`` (time spent in them when called from ``func``), DEPTH levels."""
    callees = [(callers[func][3], callee) for callee, (*_, callers) in stats.items() if func in callers]
    for cum, callee in sorted(callees, reverse=True):
        if cum < SHOWN * total:
            break
        print(f"    {'  ' * depth}{cum / ticks * 1e6:6.1f} us {cum / total:5.1%}  {where(callee)}")
        if depth < DEPTH:
            tree(stats, callee, total, ticks, depth + 1)


def main() -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--robots", default="chain7", help=f"comma-separated, of {', '.join(ROBOTS)}")
    ap.add_argument("--ticks", type=int, default=2000, help="callback calls per round")
    ap.add_argument("--rounds", type=int, default=5, help="interleaved timing rounds")
    ap.add_argument("--top", type=int, default=15, help="functions listed by own time")
    args = ap.parse_args()
    try:
        demo.check_env()
    except demo.DemoError as err:
        sys.exit(f"node_tick_profile: {err}")
    with tempfile.TemporaryDirectory(prefix="cdamp_profile_") as tmp:
        for robot in make_robots(args.robots.split(","), Path(tmp)):
            profile(robot, args, Path(tmp))
    return 0


if __name__ == "__main__":
    sys.exit(main())
