"""Soak run (not a test, not collected by pytest): the simulated joint in real time and the
controller on config/three_joints.yaml at 1 kHz, as two child processes, for ``--seconds``
(default 600 s of wall time).

Samples the controller's resident memory (VmRSS in /proc/PID/status) every ``--sample`` s,
records the controller's /diagnostics (late_ticks, rejected_messages, faults) and the
motor_effort command times, and prints: memory growth from the first to the last sample (MB;
target under 5 MB), late-tick bursts (runs of consecutive diagnostics periods whose late_ticks
count rose, so a burst is a stretch of late ticks; count and longest, in diagnostics periods of
0.5 s), the rejected messages, any fault, and the command rate achieved (Hz). Exits 1 on a fault
or when memory grew by 5 MB or more.

    make soak                                  # 600 s
    .venv/bin/python benchmarks/soak.py --seconds 60
"""
from __future__ import annotations

import argparse
import os
import sys
import time
from pathlib import Path

import rclpy
from diagnostic_msgs.msg import DiagnosticArray
from lifecycle_msgs.msg import Transition
from rclpy.qos import QoSProfile
from sensor_msgs.msg import JointState

from compliant_damping import demo
from compliant_damping.io import config
from compliant_damping.nodes import scenario_player as player

PARAMS = config.bundled().parent / "three_joints.yaml"
GROWTH_TARGET_MB = 5.0


def rss_mb(pid: int) -> float:
    """Resident set size of process ``pid`` (MB, from /proc/PID/status VmRSS in kB)."""
    with open(f"/proc/{pid}/status") as status:
        kb = next(line.split()[1] for line in status if line.startswith("VmRSS:"))
    return int(kb) / 1024.0


def bursts(late_counts: list) -> tuple:
    """(number of runs, longest run) of consecutive periods in which the late-tick count rose."""
    runs, run, longest = 0, 0, 0
    for before, after in zip(late_counts, late_counts[1:]):
        run = run + 1 if after > before else 0
        runs += run == 1
        longest = max(longest, run)
    return runs, longest


def soak(seconds: float, sample: float, folder) -> int:
    demo.check_env()
    ns = f"/cdamp_soak_{os.getpid()}"
    params = demo.namespaced_file(PARAMS, ns, folder / "soak.params.yaml")
    ros_args = ["--ros-args", "-r", f"__ns:={ns}", "-r", f"/clock:={ns}/clock", "-r", f"/diagnostics:={ns}/diagnostics",
                "--params-file", str(params)]
    commands = {"simulated_joint": demo.module("simulated_joint_node", *ros_args, "-p", "lock_step:=false"),
                "controller": demo.module("controller_node", *ros_args, "-p", "use_sim_time:=false")}
    procs = {}
    late, rejected, faults, memory, command_wall = [], [], set(), [], []
    try:
        demo.start(commands, folder / "soak", procs)
        rclpy.init()
        try:
            node = rclpy.create_node("soak_probe", namespace=ns)

            def on_diag(msg):
                values = [{kv.key: kv.value for kv in s.values} for s in msg.status]
                late.append(int(values[0]["late_ticks"]))
                rejected.append(int(values[0]["rejected_messages"]))
                faults.update(f"{s.hardware_id}: {v['fault']}" for s, v in zip(msg.status, values) if v["fault"])
            node.create_subscription(DiagnosticArray, "diagnostics", on_diag, 10)
            node.create_subscription(JointState, "motor_effort", lambda m: command_wall.append(time.monotonic()),
                                     QoSProfile(depth=1000))
            deadline = time.monotonic() + 30.0
            for step in (Transition.TRANSITION_CONFIGURE, Transition.TRANSITION_ACTIVATE):
                if not player.transition(node, step, deadline):
                    print(f"lifecycle transition {step} failed; logs in {folder}", file=sys.stderr)
                    return 1
            start = time.monotonic()
            while time.monotonic() - start < seconds:
                memory.append(rss_mb(procs["controller"].pid))
                player.spin_until(node, lambda: False, min(time.monotonic() + sample, start + seconds))
            memory.append(rss_mb(procs["controller"].pid))
            node.destroy_node()
        finally:
            rclpy.shutdown()
    finally:
        for proc in procs.values():
            demo.stop(proc, 5.0)
    span = command_wall[-1] - command_wall[0] if len(command_wall) > 1 else 0.0
    runs, longest = bursts(late)
    growth = memory[-1] - memory[0]
    print(f"soak {seconds:.0f} s on {PARAMS.name}")
    print(f"controller RSS {memory[0]:.1f} -> {memory[-1]:.1f} MB: growth {growth:+.2f} MB "
          f"(target under {GROWTH_TARGET_MB:.0f} MB), peak {max(memory):.1f} MB over {len(memory)} samples")
    print(f"late ticks {late[-1] if late else 'n/a'}: {runs} bursts, longest {longest} diagnostics periods (0.5 s each)")
    print(f"rejected messages {rejected[-1] if rejected else 'n/a'}; faults: {sorted(faults) or 'none'}")
    print(f"commands {len(command_wall)} over {span:.1f} s: {len(command_wall) / span if span else 0.0:.1f} Hz (1000 Hz asked)")
    return 1 if faults or growth >= GROWTH_TARGET_MB else 0


def main(argv=None) -> int:
    p = argparse.ArgumentParser(description=__doc__.split("\n\n")[0])
    p.add_argument("--seconds", type=float, default=600.0, help="wall time of the soak (s)")
    p.add_argument("--sample", type=float, default=5.0, help="memory sampling interval (s)")
    p.add_argument("--out", default="results/soak", help="folder for the logs")
    args = p.parse_args(argv)
    folder = Path(args.out)
    folder.mkdir(parents=True, exist_ok=True)
    return soak(args.seconds, args.sample, folder)


if __name__ == "__main__":
    sys.exit(main())
