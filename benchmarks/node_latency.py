"""State-to-command latency of the controller node against a bare rclpy echo node, side by side in one run (not a test).

Two nodes answer ``joint_states`` (sensor_msgs/JointState, sensor-data QoS) on ``motor_effort``
with the stamp of the state they answer:

* echo: a minimal rclpy node (``--echo`` below) that publishes zero effort per motor entry at
  once (as many entries as the robot has joints): DDS and rclpy overhead with no control law,
  the floor;
* controller: ``compliant_damping.nodes.controller_node`` with the robot's parameters, law
  ``decoupled_damper``, configured and activated through its lifecycle services;
  ``watchdog_timeout`` is raised so pauses of the shared machine do not put it in safe mode.

Robots (latency_robots.py): ``one_joint`` (config/one_joint.yaml, the built-in bench knee),
``leg`` (config/compliant_leg.yaml, the bundled three-joint URDF leg, as the file sets it:
array output on) and ``chain7`` (the seven-joint URDF chain of tick_worker.py's ``robot7``,
written with its parameter file to a temporary folder at run time).

Each node runs as a child process in a namespace of its own. This process (an rclpy node in that
namespace) publishes joint states (every joint near REST_Q with its spring holding the gravity
load, small noise) stamped one control period (1 ms) apart. The state-to-command latency is from
just before the publish to the answer's arrival in this process (the DDS reception stamp, system
clock): the node's own latency, transport both ways included. The round trip, to this process's
callback of the answer, adds this process's rclpy executor dispatch (the same for both nodes) and
is printed beside it.

Pacing (``--rate``, default 1000 Hz): each state goes out on its slot of a 1 kHz grid and is
answered before the next is sent (paced ping-pong). So the nodes see the 1 kHz stream a joint
driver sends, idling between messages as they would on a robot, while no state waits in a queue
behind the previous one: each latency is one state's own. An answer later than one period makes
the next slot late; slots already past are skipped (counted; their stamps are skipped too, as a
driver that missed a tick would). ``--rate 0``: back-to-back ping-pong, the next state as soon as
the answer comes (the node's maximum rate, 1 / median round trip).

Reported per node and robot: median, 99th percentile and max latency, median and p99 round trip,
the answers later than one period (``late``), and the child's CPU time (utime + stime from
/proc/PID/stat, clock-tick resolution) per timed message. The controller's CPU includes its
watchdog timer and diagnostics, which run whether or not states arrive, so each node's background
(idle) CPU is measured over IDLE_WINDOW s just before the timed messages and the CPU per message
beyond it is printed beside the total (an estimate). The machine's other load over each timed
window (cores busy in /proc/stat minus this process and the child) and this process's CPU per
message are printed per round. Echo and controller alternate for ``--rounds`` rounds, each in
fresh processes, the order swapped every round, so drift of the shared machine hits both; figures
are medians over rounds (max: over all rounds) and the ratios controller/echo are ratios of those
medians. Whether the controller's p99 is within TARGET x the echo's is printed per robot, not
asserted. The rounds' figures are written to OUT/node_latency.json.

Needs ROS_AUTOMATIC_DISCOVERY_RANGE=LOCALHOST, ROS_LOCALHOST_ONLY=1 and a numeric ROS_DOMAIN_ID
(``make bench`` sets them); the children get the same environment.

Usage: python benchmarks/node_latency.py [--robots one_joint,leg,chain7] [--rounds N] [--count N]
                                         [--warmup N] [--rate HZ] [--out DIR]
       python benchmarks/node_latency.py --echo --ros-args -r __ns:=/NS   (the echo child)
"""
from __future__ import annotations

import argparse
import json
import os
import statistics
import subprocess
import sys
import tempfile
import time
from pathlib import Path

import numpy as np
import rclpy
import rclpy.utilities
from diagnostic_msgs.msg import DiagnosticArray, DiagnosticStatus
from latency_robots import LAW, ROBOTS, BenchRobot, make_robots
from lifecycle_msgs.msg import Transition
from rclpy.executors import SingleThreadedExecutor
from rclpy.node import Node
from rclpy.qos import QoSProfile, qos_profile_sensor_data
from sensor_msgs.msg import JointState

from compliant_damping import demo
from compliant_damping.nodes import scenario_player, spin

WATCHDOG_TIMEOUT = 10.0  # s, instead of the file's 0.05
START_TIMEOUT = 30.0     # s for a child to come up (and be configured and activated)
ANSWER_TIMEOUT = 1.0     # s before a message counts as lost
IDLE_WINDOW = 1.0        # s without messages, to measure a node's background CPU
MAX_LOST = 20            # lost timed messages before a round is given up
TARGET = 1.5             # controller p99 / echo p99 aimed at (issue 10)
STATS = ("median", "p99", "max", "rt_median", "rt_p99", "late", "cpu", "net", "idle", "others", "driver")


class EchoNode(Node):
    """Answers each joint state at once: zero effort per motor entry, the same stamp."""

    def __init__(self, own_process: bool = False):  # spin.run's flag: a bare node has nothing of its own to freeze
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


def busy_jiffies() -> tuple[int, int]:
    """(busy, total) clock ticks of all cores from /proc/stat."""
    ticks = [int(v) for v in open("/proc/stat").readline().split()[1:]]
    idle = ticks[3] + ticks[4]  # idle + iowait
    return sum(ticks[:8]) - idle, sum(ticks[:8])


class Driver:
    """Joint states on ``joint_states``, answers on ``motor_effort``, from ``node`` (in the child's namespace).

    ``rate`` > 0: paced ping-pong on a grid of 1 / rate s; 0: back-to-back ping-pong.
    """

    def __init__(self, node, robot: BenchRobot, period_ns: int, rate: float, seed: int):
        self.node, self.robot, self.period_ns = node, robot, period_ns
        self.pace_ns = round(1e9 / rate) if rate > 0 else 0
        self.pub = node.create_publisher(JointState, "joint_states", qos_profile_sensor_data)
        node.create_subscription(JointState, "motor_effort", self._on_answer, QoSProfile(depth=1000))
        self.rng = np.random.default_rng(seed)
        self.slot = 0          # stamps are slot * period_ns: a control tick per slot
        self.skipped = 0       # slots passed while an answer was outstanding
        self.origin = None     # perf_counter_ns of slot 0
        self.waiting = self.answered_at = self.arrived_at = None
        self.executor = None

    def start_spinning(self):
        """Own executor from here on (the lifecycle calls before use the global one)."""
        self.executor = SingleThreadedExecutor()
        self.executor.add_node(self.node)

    def _on_answer(self, msg, info):
        if _ns(msg.header.stamp) == self.waiting:
            self.answered_at = time.perf_counter_ns()
            self.arrived_at = info.get("received_timestamp") or time.time_ns()  # no DDS stamp: the callback's

    def state(self) -> JointState:
        """The next slot's joint state (stamp: slot times the control period, never zero, never repeated)."""
        self.slot += 1
        return self.robot.state(self.rng, self.slot * self.period_ns)

    def restart_pacing(self):
        """The next state goes out at once and the grid runs on from it (after a pause of the driver)."""
        self.origin = None

    def _wait_for_slot(self):
        """Paced: sleep until the next slot; when it has passed already, skip to the current one."""
        now = time.perf_counter_ns()
        if self.origin is None:
            self.origin = now - (self.slot + 1) * self.pace_ns
        due = self.origin + (self.slot + 1) * self.pace_ns
        if now >= due + self.pace_ns:  # a slot or more missed: this state goes on the current slot
            behind = (now - due) // self.pace_ns
            self.skipped += behind
            self.slot += behind
        elif now < due:
            time.sleep((due - now) * 1e-9)

    def ping(self, timeout: float) -> tuple[float, float] | None:
        """(state-to-command latency, round trip) in s of one joint state, or None when no answer comes
        within ``timeout`` s: publish to the answer's arrival (DDS reception stamp, system clock), and
        publish to this process's callback of it (rclpy executor dispatch included)."""
        if self.pace_ns:
            self._wait_for_slot()
        msg = self.state()
        self.waiting, self.answered_at = _ns(msg.header.stamp), None
        sent = time.time_ns()
        start = time.perf_counter_ns()
        deadline = start + int(timeout * 1e9)
        self.pub.publish(msg)
        while self.answered_at is None:
            left = deadline - time.perf_counter_ns()
            if left <= 0:
                return None
            self.executor.spin_once(timeout_sec=left * 1e-9)
        return (self.arrived_at - sent) * 1e-9, (self.answered_at - start) * 1e-9


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
    statistics (s), answers later than a period, the child's CPU (s per message; ``idle`` in s per s)
    and the machine's other load (cores busy besides the child and this process)."""
    idle = cpu_seconds(pid)
    time.sleep(IDLE_WINDOW)
    cpu = cpu_seconds(pid)
    idle = (cpu - idle) / IDLE_WINDOW
    driver.restart_pacing()  # not a skipped slot per ms of the idle window
    busy0, total0 = busy_jiffies()
    own0, start = time.process_time(), time.perf_counter()
    trips, lost, skipped0 = [], 0, driver.skipped
    while len(trips) < count:
        times = driver.ping(ANSWER_TIMEOUT)
        if times is None:
            lost += 1
            if lost > MAX_LOST:
                raise RuntimeError(f"{lost} messages unanswered ({where})")
        else:
            trips.append(times)
    cpu, wall = cpu_seconds(pid) - cpu, time.perf_counter() - start
    own = time.process_time() - own0
    busy1, total1 = busy_jiffies()
    cores_busy = (busy1 - busy0) / max(total1 - total0, 1) * os.cpu_count()
    (latency, trips), sent = np.array(trips).T, len(trips) + lost
    return {"median": float(np.median(latency)), "p99": float(np.percentile(latency, 99)),
            "max": float(latency.max()), "max_at": int(latency.argmax()), "rt_median": float(np.median(trips)),
            "rt_p99": float(np.percentile(trips, 99)),
            "late": int(np.count_nonzero(latency > driver.period_ns * 1e-9)), "skipped": driver.skipped - skipped0,
            "cpu": cpu / sent, "idle": idle, "net": (cpu - idle * wall) / sent, "lost": lost,
            "others": max(cores_busy - (cpu + own) / wall, 0.0), "rate": sent / wall, "driver": own / sent}


def measure(kind: str, robot: BenchRobot, k: int, args, out: Path) -> dict:
    """Round ``k`` of one node on ``robot``: start it in a fresh namespace, warm up, time ``args.count``
    pings, stop it."""
    ns = f"/cdamp_latency_{os.getpid()}_{robot.name}_{kind}_{k}"
    ros_args = ["--ros-args", "-r", f"__ns:={ns}", "-r", f"/diagnostics:={ns}/diagnostics"]
    if kind == "echo":
        cmd = [sys.executable, str(Path(__file__).resolve()), "--echo", *ros_args]
    else:
        params = robot.controller_file(ns, out / f"{robot.name}_parameters.yaml",
                                       {"law": LAW, "watchdog_timeout": WATCHDOG_TIMEOUT})
        cmd = demo.module("controller_node", *ros_args, "--params-file", str(params))
    log = out / f"{robot.name}_{kind}_{k}.log"
    with open(log, "w") as log_file:
        proc = subprocess.Popen(cmd, stdout=log_file, stderr=subprocess.STDOUT, env=dict(os.environ))
        node = None
        try:
            node = rclpy.create_node("latency_driver", namespace=ns)
            driver = Driver(node, robot, round(1e9 / robot.control_rate), args.rate, seed=k)
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
    return (f"median {r['median'] * 1e6:5.0f} us  p99 {r['p99'] * 1e6:5.0f} us  max {r['max'] * 1e6:6.0f} us  "
            f"(round trip {r['rt_median'] * 1e6:5.0f}, {r['rt_p99'] * 1e6:5.0f})  late {r['late']:4.0f}  "
            f"CPU {r['cpu'] * 1e6:4.0f} us/msg, {r['net'] * 1e6:4.0f} beyond idle ({r['idle']:4.0%} of a core)")


def summary(results: dict, rounds: int) -> dict:
    """Per robot and node: the medians over rounds of each statistic, max over all rounds."""
    med = {}
    for name, kinds in results.items():
        med[name] = {kind: {key: statistics.median(r[key] for r in rs) for key in STATS} for kind, rs in kinds.items()}
        for kind, rs in kinds.items():
            med[name][kind]["max"] = max(r["max"] for r in rs)
    return med


def report(med: dict, args) -> None:
    print(f"medians over {args.rounds} rounds (max: over all rounds); state-to-command latency in us "
          f"(publish to the command's arrival), then the round trip to this process's callback:")
    print(f"  {'robot':<10} {'echo med':>8} {'p99':>6} {'max':>6}  {'ctrl med':>8} {'p99':>6} {'max':>6}  "
          f"{'p99 ratio':>9} {'med ratio':>9}  p99 within {TARGET}x echo  | round trip p99 ratio, med ratio; "
          f"CPU/msg ratio")
    for name, m in med.items():
        e, c = m["echo"], m["controller"]
        ratio = c["p99"] / e["p99"]
        print(f"  {name:<10} {e['median'] * 1e6:8.0f} {e['p99'] * 1e6:6.0f} {e['max'] * 1e6:6.0f}  "
              f"{c['median'] * 1e6:8.0f} {c['p99'] * 1e6:6.0f} {c['max'] * 1e6:6.0f}  "
              f"{ratio:8.2f}x {c['median'] / e['median']:8.2f}x  {'met' if ratio <= TARGET else 'NOT met':<23}"
              f"| {c['rt_p99'] / e['rt_p99']:.2f}x, {c['rt_median'] / e['rt_median']:.2f}x; "
              f"{c['cpu'] / e['cpu']:.2f}x")
    if args.rate <= 0:
        for name, m in med.items():
            print(f"  {name}: max ping-pong rate echo {1.0 / m['echo']['rt_median']:.0f} /s, "
                  f"controller {1.0 / m['controller']['rt_median']:.0f} /s")


def drive(args) -> None:
    try:
        demo.check_env()
    except demo.DemoError as err:
        sys.exit(f"node_latency: {err}, as does `make bench`")
    out = Path(args.out)
    out.mkdir(parents=True, exist_ok=True)
    pacing = f"paced ping-pong at {args.rate:g} Hz" if args.rate > 0 else "back-to-back ping-pong"
    print(f"joint_states -> motor_effort, {pacing}, {args.count} timed messages after {args.warmup} warm-up, "
          f"{args.rounds} rounds alternating echo / controller (law {LAW}) in fresh processes; "
          f"CPU per message at {1e3 / os.sysconf('SC_CLK_TCK'):.0f} ms tick resolution; "
          f"load average at start {os.getloadavg()[0]:.2f} on {os.cpu_count()} cores")
    results = {}
    with tempfile.TemporaryDirectory(prefix="cdamp_latency_") as tmp:
        robots = make_robots(args.robots.split(","), Path(tmp))
        for robot in robots:
            print(f"  {robot.name}: {robot.description}")
            results[robot.name] = {"echo": [], "controller": []}
        rclpy.init()
        try:
            for k in range(args.rounds):
                for robot in robots:
                    for kind in ("echo", "controller")[::1 if k % 2 == 0 else -1]:
                        try:
                            r = measure(kind, robot, k, args, out)
                        except RuntimeError as err:
                            sys.exit(f"node_latency: {err}")
                        results[robot.name][kind].append(r)
                        print(f"  round {k + 1} {robot.name:<9} {kind:<10} {fmt(r)}  {r['rate']:4.0f}/s  "
                              f"driver CPU {r['driver'] * 1e6:3.0f} us/msg, other load {r['others']:.2f} cores"
                              + (f"  ({r['lost']} lost)" if r["lost"] else "")
                              + (f"  ({r['skipped']} slots skipped)" if r["skipped"] else ""), flush=True)
        finally:
            rclpy.try_shutdown()
    med = summary(results, args.rounds)
    report(med, args)
    print(f"load average at end {os.getloadavg()[0]:.2f}")
    (out / "node_latency.json").write_text(json.dumps({"args": vars(args), "rounds": results, "medians": med},
                                                      indent=1))


def main() -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--echo", action="store_true", help="run the echo node (a child of the benchmark)")
    ap.add_argument("--robots", default=",".join(ROBOTS), help=f"comma-separated, of {', '.join(ROBOTS)}")
    ap.add_argument("--rounds", type=int, default=3, help="rounds of echo and controller per robot")
    ap.add_argument("--count", type=int, default=2000, help="timed messages per round")
    ap.add_argument("--warmup", type=int, default=200, help="answered messages before timing")
    ap.add_argument("--rate", type=float, default=1000.0, help="Hz of the paced joint states; 0: back-to-back")
    ap.add_argument("--out", default="results/node_latency", help="folder for the children's logs and the results")
    args = ap.parse_args(rclpy.utilities.remove_ros_args(sys.argv)[1:])
    if args.echo:
        return spin.run(EchoNode, sys.argv)
    unknown = set(args.robots.split(",")) - set(ROBOTS)
    if unknown:
        ap.error(f"unknown robot(s) {', '.join(sorted(unknown))}; known: {', '.join(ROBOTS)}")
    drive(args)
    return 0


if __name__ == "__main__":
    sys.exit(main())
