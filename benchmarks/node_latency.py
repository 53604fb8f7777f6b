"""Per-message cost of the controller node against a bare rclpy echo node, side by side in one run (not a test).

Two nodes answer ``joint_states`` (sensor_msgs/JointState, sensor-data QoS) on ``motor_effort``
with the stamp of the state they answer:

* echo: a minimal rclpy node (``--echo`` below) that publishes zero effort per motor entry at
  once: DDS and rclpy overhead with no control law, the floor;
* controller: ``compliant_damping.nodes.controller_node`` with the bundled one-joint file, law
  ``decoupled_damper``, configured and activated through its lifecycle services; an override file
  raises ``watchdog_timeout`` so pauses of the shared machine do not put it in safe mode.

Each node runs as a child process in a namespace of its own. This process (an rclpy node in that
namespace) publishes one joint state (link entry ``knee``, motor entry ``knee_motor``, near rest
with small noise, a new stamp each message), waits for the answer with that stamp (ping-pong), and
times publish to answer. Reported per node: median, 99th percentile and max round trip, the
implied maximum ping-pong rate (1 / median), and the child's CPU time (utime + stime from
/proc/PID/stat, clock-tick resolution) per timed message. The controller's CPU includes its
watchdog timer (control_rate) and diagnostics, which run whether or not states arrive: part of
what the node costs. So each node's background (idle) CPU is also measured, over IDLE_WINDOW s
with no messages just before the timed ones, and the CPU per message beyond that background
(total minus background rate times the timed wall time; an estimate, since the timer competes
with the messages) is printed beside the total. Echo and controller alternate for ``--rounds`` rounds, each in fresh
processes, so drift of the shared machine hits both; figures are medians over rounds and the
ratios controller/echo are ratios of those medians.

Needs ROS_AUTOMATIC_DISCOVERY_RANGE=LOCALHOST, ROS_LOCALHOST_ONLY=1 and a numeric ROS_DOMAIN_ID
(``make bench`` sets them); the children get the same environment.

Usage: python benchmarks/node_latency.py [--rounds N] [--count N] [--warmup N] [--out DIR]
       python benchmarks/node_latency.py --echo --ros-args -r __ns:=/NS   (the echo child)
"""
from __future__ import annotations

import argparse
import os
import statistics
import subprocess
import sys
import time
from pathlib import Path

import numpy as np
import rclpy
import rclpy.utilities
import yaml
from builtin_interfaces.msg import Time
from diagnostic_msgs.msg import DiagnosticArray, DiagnosticStatus
from lifecycle_msgs.msg import Transition
from rclpy.executors import SingleThreadedExecutor
from rclpy.node import Node
from rclpy.qos import QoSProfile, qos_profile_sensor_data
from sensor_msgs.msg import JointState

from compliant_damping import demo
from compliant_damping.control.sample import JointSample
from compliant_damping.io import config
from compliant_damping.io import joint_state_codec as codec
from compliant_damping.nodes import scenario_player, spin

LAW = "decoupled_damper"
WATCHDOG_TIMEOUT = 10.0  # s, instead of the file's 0.05
START_TIMEOUT = 20.0     # s for a child to come up (and be configured and activated)
ANSWER_TIMEOUT = 1.0     # s before a message counts as lost
IDLE_WINDOW = 1.0        # s without messages, to measure a node's background CPU
MAX_LOST = 20            # lost timed messages before a round is given up
REST_Q = 0.05            # rad, link position the states sit near


class EchoNode(Node):
    """Answers each joint state at once: zero effort per motor entry, the same stamp."""

    def __init__(self):
        super().__init__("latency_echo")
        self._pub = self.create_publisher(JointState, "motor_effort", 1000)  # the controller's QoS
        self.create_subscription(JointState, "joint_states", self._on_state, qos_profile_sensor_data)

    def _on_state(self, msg):
        names = [n for n in msg.name if n.endswith("_motor")]
        answer = JointState(name=names, effort=[0.0] * len(names))
        answer.header.stamp = msg.header.stamp
        self._pub.publish(answer)


def _ns(stamp) -> int:
    return stamp.sec * 1_000_000_000 + stamp.nanosec


def cpu_seconds(pid: int) -> float:
    """utime + stime (s) of a running process from /proc/PID/stat."""
    fields = open(f"/proc/{pid}/stat").read().rsplit(")", 1)[1].split()
    return (int(fields[11]) + int(fields[12])) / os.sysconf("SC_CLK_TCK")


class Driver:
    """Ping-pong on ``joint_states`` -> ``motor_effort`` from ``node`` (in the child's namespace)."""

    def __init__(self, node, joint, period_ns: int, seed: int):
        self.node, self.joint, self.period_ns = node, joint, period_ns
        self.pub = node.create_publisher(JointState, "joint_states", qos_profile_sensor_data)
        node.create_subscription(JointState, "motor_effort", self._on_answer, QoSProfile(depth=1000))
        self.rng = np.random.default_rng(seed)
        self.sent = 0
        self.waiting = self.answered_at = None
        self.executor = None

    def start_spinning(self):
        """Own executor from here on (the lifecycle calls before use the global one)."""
        self.executor = SingleThreadedExecutor()
        self.executor.add_node(self.node)

    def _on_answer(self, msg):
        if _ns(msg.header.stamp) == self.waiting:
            self.answered_at = time.perf_counter_ns()

    def state(self) -> JointState:
        """Next joint state: the link near REST_Q, the spring holding the nominal gravity load, small noise."""
        m = self.joint.model
        q = REST_Q + 1e-5 * self.rng.standard_normal()
        theta = REST_Q + m.gravity(REST_Q) / m.spring_stiffness + 1e-5 * self.rng.standard_normal()
        dq, dtheta = 1e-3 * self.rng.standard_normal(2)
        sample = JointSample(q, dq, theta, dtheta, m.spring_stiffness * (theta - q))
        name, position, velocity, effort = codec.encode_states([self.joint.name], [sample], [0.0])
        self.sent += 1
        ns = self.sent * self.period_ns  # a control tick per message; never zero, never repeated
        msg = JointState(name=name, position=position, velocity=velocity, effort=effort)
        msg.header.stamp = Time(sec=ns // 1_000_000_000, nanosec=ns % 1_000_000_000)
        return msg

    def ping(self, timeout: float) -> float | None:
        """Round trip (s) of one joint state, or None when no answer comes within ``timeout`` s."""
        msg = self.state()
        self.waiting, self.answered_at = _ns(msg.header.stamp), None
        start = time.perf_counter_ns()
        deadline = start + int(timeout * 1e9)
        self.pub.publish(msg)
        while self.answered_at is None:
            left = deadline - time.perf_counter_ns()
            if left <= 0:
                return None
            self.executor.spin_once(timeout_sec=left * 1e-9)
        return (self.answered_at - start) * 1e-9


def controller_fault(node, deadline: float) -> str | None:
    """The controller's diagnostics (remapped into its namespace): a fault message, or None when all OK."""
    heard = []
    node.create_subscription(DiagnosticArray, "diagnostics", heard.append, 10)
    scenario_player.spin_until(node, lambda: heard, deadline)
    if not heard:
        return "no diagnostics heard"
    bad = [s.message for s in heard[-1].status if s.level != DiagnosticStatus.OK]
    return "; ".join(bad) or None


def time_pings(driver, pid: int, count: int, where: str) -> dict:
    """Background CPU of child ``pid`` over IDLE_WINDOW s, then ``count`` answered pings: round-trip
    statistics (s) and the child's CPU (s per message; ``idle`` in s per s)."""
    idle = cpu_seconds(pid)
    time.sleep(IDLE_WINDOW)
    cpu = cpu_seconds(pid)
    idle = (cpu - idle) / IDLE_WINDOW
    start = time.perf_counter()
    trips, lost = [], 0
    while len(trips) < count:
        rtt = driver.ping(ANSWER_TIMEOUT)
        if rtt is None:
            lost += 1
            if lost > MAX_LOST:
                raise RuntimeError(f"{lost} messages unanswered ({where})")
        else:
            trips.append(rtt)
    cpu, wall = cpu_seconds(pid) - cpu, time.perf_counter() - start
    trips, sent = np.array(trips), len(trips) + lost
    return {"median": float(np.median(trips)), "p99": float(np.percentile(trips, 99)), "max": float(trips.max()),
            "cpu": cpu / sent, "idle": idle, "net": (cpu - idle * wall) / sent, "lost": lost}


def measure(kind: str, k: int, args, ctrl, out: Path) -> dict:
    """Round ``k`` of one node: start it in a fresh namespace, warm up, time ``args.count`` pings, stop it."""
    ns = f"/cdamp_latency_{os.getpid()}_{kind}_{k}"
    ros_args = ["--ros-args", "-r", f"__ns:={ns}", "-r", f"/diagnostics:={ns}/diagnostics"]
    if kind == "echo":
        cmd = [sys.executable, str(Path(__file__).resolve()), "--echo", *ros_args]
    else:
        base = demo.namespaced_file(config.bundled(), ns, out / "parameters.yaml")
        override = out / "override.yaml"
        override.write_text(yaml.safe_dump({f"{ns}/{config.CONTROLLER_NODE}": {"ros__parameters": {
            "law": LAW, "watchdog_timeout": WATCHDOG_TIMEOUT}}}))
        cmd = demo.module("controller_node", *ros_args, "--params-file", str(base), "--params-file", str(override))
    log = out / f"{kind}_{k}.log"
    with open(log, "w") as log_file:
        proc = subprocess.Popen(cmd, stdout=log_file, stderr=subprocess.STDOUT, env=dict(os.environ))
        node = None
        try:
            node = rclpy.create_node("latency_driver", namespace=ns)
            driver = Driver(node, ctrl.joints[0], round(1e9 / ctrl.control_rate), seed=k)
            deadline = time.monotonic() + START_TIMEOUT
            if kind == "controller":
                for step in (Transition.TRANSITION_CONFIGURE, Transition.TRANSITION_ACTIVATE):
                    if not scenario_player.transition(node, step, deadline):
                        raise RuntimeError(f"controller: lifecycle transition {step} failed; see {log}")
            matched = lambda: (driver.pub.get_subscription_count() > 0  # noqa: E731
                               and node.count_publishers("motor_effort") > 0)
            if not scenario_player.spin_until(node, matched, deadline):
                raise RuntimeError(f"{kind}: not connected after {START_TIMEOUT} s; see {log}")
            driver.start_spinning()
            warm = 0
            while warm < args.warmup:  # the first answers may be lost while the endpoints match
                warm += driver.ping(ANSWER_TIMEOUT) is not None
                if time.monotonic() > deadline:
                    raise RuntimeError(f"{kind}: {warm} of {args.warmup} warm-up answers in {START_TIMEOUT} s; "
                                       f"see {log}")
            result = time_pings(driver, proc.pid, args.count, f"{kind}: see {log}")
            driver.executor.remove_node(node)
            fault = controller_fault(node, time.monotonic() + 2.0) if kind == "controller" else None
            if fault:
                raise RuntimeError(f"controller not healthy after the round: {fault}; see {log}")
        finally:
            if node is not None:
                node.destroy_node()
            demo.stop(proc)
    return result


def fmt(r: dict) -> str:
    return (f"median {r['median'] * 1e3:6.3f} ms  p99 {r['p99'] * 1e3:6.3f} ms  max {r['max'] * 1e3:6.2f} ms  "
            f"CPU {r['cpu'] * 1e6:4.0f} us/msg, {r['net'] * 1e6:4.0f} beyond idle ({r['idle']:4.0%} of a core)")


def drive(args) -> None:
    try:
        demo.check_env()
    except demo.DemoError as err:
        sys.exit(f"node_latency: {err}, as does `make bench`")
    out = Path(args.out)
    out.mkdir(parents=True, exist_ok=True)
    ctrl, _ = config.load(config.bundled())
    print(f"ping-pong joint_states -> motor_effort, one joint ({ctrl.joints[0].name}), {args.count} timed messages "
          f"after {args.warmup} warm-up, {args.rounds} rounds alternating echo / controller (law {LAW}); "
          f"CPU per message at {1e3 / os.sysconf('SC_CLK_TCK'):.0f} ms tick resolution")
    results = {"echo": [], "controller": []}
    rclpy.init()
    try:
        for k in range(args.rounds):
            for kind in results:
                try:
                    r = measure(kind, k, args, ctrl, out)
                except RuntimeError as err:
                    sys.exit(f"node_latency: {err}")
                results[kind].append(r)
                print(f"  round {k + 1} {kind:<10} {fmt(r)}" + (f"  ({r['lost']} lost)" if r["lost"] else ""),
                      flush=True)
    finally:
        rclpy.try_shutdown()
    med = {kind: {key: statistics.median(r[key] for r in rs) for key in ("median", "p99", "max", "cpu", "net", "idle")}
           for kind, rs in results.items()}
    print(f"medians over {args.rounds} rounds:")
    for kind, m in med.items():
        print(f"  {kind:<10} {fmt(m)}  max ping-pong rate {1.0 / m['median']:6.0f} /s")
    e, c = med["echo"], med["controller"]
    print(f"  ratio controller/echo: median round trip {c['median'] / e['median']:.2f}x, "
          f"p99 {c['p99'] / e['p99']:.2f}x, CPU per message {c['cpu'] / e['cpu']:.2f}x "
          f"(beyond idle {c['net'] / e['net']:.2f}x); "
          f"median round trip {(c['median'] - e['median']) * 1e6:.0f} us longer")


def main() -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--echo", action="store_true", help="run the echo node (a child of the benchmark)")
    ap.add_argument("--rounds", type=int, default=3, help="rounds of echo then controller")
    ap.add_argument("--count", type=int, default=2000, help="timed messages per round")
    ap.add_argument("--warmup", type=int, default=200, help="answered messages before timing")
    ap.add_argument("--out", default="results/node_latency", help="folder for the children's logs and parameter files")
    args = ap.parse_args(rclpy.utilities.remove_ros_args(sys.argv)[1:])
    if args.echo:
        return spin.run(EchoNode, sys.argv)
    drive(args)
    return 0


if __name__ == "__main__":
    sys.exit(main())
