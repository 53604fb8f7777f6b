"""``cdamp demo``: the end-stop impact over ROS with three laws, compared with the offline simulator.

Per law, three processes on loopback DDS (the environment must say so; see :func:`check_env`):
the simulated joint in lock step, the controller on sim time with that law, and the scenario
player, which activates the controller, sends the scenario's motion on ``link_trajectory`` (the
spline through its positions every 5 ms, scenarios.streamed), records ``joint_states`` and
``motor_effort`` and paces the loop (the joint takes its commands from the player on
config.PACED_EFFORT, see nodes/scenario_player.py). The same streamed scenario then runs offline
(simulate.simulate); both runs are runs.Run, summarised by metrics.joint_metrics. Writes ``summary.json``, the
processes' logs and ``impact.png`` (link position and motor torque around the impact, one trace
per law) to the output folder. No ROS imports here: the ROS work happens in the child processes.
"""
from __future__ import annotations

import dataclasses
import json
import os
import signal
import subprocess
import sys
import time
from pathlib import Path

import numpy as np
import yaml

from compliant_damping.control import controller
from compliant_damping.io import config, plots, recordings
from compliant_damping.io.metrics import joint_metrics, to_dicts
from compliant_damping.io.runs import Run
from compliant_damping.sim import scenarios, simulate

DEMO_LAWS = ("motor_pd", "link_damping", "decoupled_damper")
SCENARIO = "end_stop_impact"
MAX_DIFFERENCE = 1e-9  # rad: ROS in lock step against the offline simulator (measured about 2e-15)
LOOPBACK_ENV = {"ROS_AUTOMATIC_DISCOVERY_RANGE": "LOCALHOST", "ROS_LOCALHOST_ONLY": "1"}


class DemoError(RuntimeError):
    """The demo cannot run or a run failed (the message says which and where the logs are)."""


def check_env(env=os.environ) -> None:
    """Refuse to start ROS processes unless DDS discovery stays on loopback with a fixed domain."""
    wrong = {k: env.get(k) for k, v in LOOPBACK_ENV.items() if env.get(k) != v}
    if wrong or not env.get("ROS_DOMAIN_ID", "").isdigit():
        raise DemoError("refusing to start ROS processes: set ROS_AUTOMATIC_DISCOVERY_RANGE=LOCALHOST, "
                        f"ROS_LOCALHOST_ONLY=1 and a numeric ROS_DOMAIN_ID (found {wrong or env.get('ROS_DOMAIN_ID')!r}); "
                        "`make demo` sets them")


def module(name: str, *args) -> list:
    """Command line that runs ``compliant_damping.nodes.<name>`` with this interpreter."""
    return [sys.executable, "-m", f"compliant_damping.nodes.{name}", *args]


def start(commands: dict, log_prefix: str, procs: dict) -> None:
    """Start each ``{name: command line}`` as a child process logging to ``<log_prefix>.<name>.log``.

    Fills ``procs`` as it goes, so a caller's ``finally`` can stop what started even if a later start fails.
    """
    for name, cmd in commands.items():
        procs[name] = subprocess.Popen(cmd, stdout=open(f"{log_prefix}.{name}.log", "w"), stderr=subprocess.STDOUT)


def stop(proc: subprocess.Popen, timeout: float = 5.0) -> int:
    """SIGINT, then wait (kill after ``timeout`` s); returns the exit code."""
    if proc.poll() is None:
        proc.send_signal(signal.SIGINT)
        try:
            proc.wait(timeout)
        except subprocess.TimeoutExpired:
            proc.kill()
            proc.wait()
    return proc.returncode


def namespaced_file(params_file: Path, ns: str, path: Path) -> Path:
    """Copy of both nodes' sections under ``ns`` (a parameter file names nodes by full name)."""
    doc = config.read(params_file)
    sections = {}
    for node in (config.CONTROLLER_NODE, config.SIM_NODE):
        tree: dict = {}
        for key, value in config.node_parameters(doc, node).items():
            *parents, leaf = key.split(".")
            branch = tree
            for part in parents:
                branch = branch.setdefault(part, {})
            branch[leaf] = value
        sections[f"{ns}/{node}"] = {"ros__parameters": tree}
    path.write_text(yaml.safe_dump(sections, sort_keys=False))
    return path


def run_over_ros(law: str, params_file: Path, out: Path, timeout: float) -> Run:
    """One lock-step run of the scenario with ``law``, as the player recorded it (source ``"ros"``)."""
    ns = f"/cdamp_demo_{os.getpid()}"  # own namespace, /clock and /diagnostics in it: other runs stay apart
    node_file = namespaced_file(params_file, ns, out / "parameters.yaml")
    ros_args = ["--ros-args", "-r", f"__ns:={ns}", "-r", f"/clock:={ns}/clock", "-r", f"/diagnostics:={ns}/diagnostics"]
    commands = {
        "simulated_joint": module("simulated_joint_node", *ros_args, "--params-file", str(node_file),
                                  "-p", "lock_step:=true", "-r", f"motor_effort:={config.PACED_EFFORT}"),
        "controller": module("controller_node", *ros_args, "--params-file", str(node_file),
                             "-p", "use_sim_time:=true", "-p", f"law:={law}"),
    }
    record = out / f"{law}.npz"
    procs = {}
    try:
        start(commands, out / law, procs)
        player = subprocess.run(module("scenario_player", "--config", str(params_file), "--scenario", SCENARIO,
                                       "--timeout", str(timeout), "--out", str(record), *ros_args),
                                stdout=open(out / f"{law}.player.log", "w"), stderr=subprocess.STDOUT,
                                timeout=timeout + 30.0)
    finally:
        for proc in procs.values():
            stop(proc)
    if player.returncode != 0:
        raise DemoError(f"{law}: the scenario player failed (exit {player.returncode}); see {out}/{law}.*.log")
    return dataclasses.replace(recordings.read_npz(record), source="ros")


def _impact_window(results: dict, stop: float, before: float = 0.1, after: float = 0.3):
    """(start, end) s around the first joint's arrival at the end stop ``stop`` (rad), over all runs."""
    hits = [r.t[np.argmax(r.q[:, 0] >= stop)] for r in results.values() if np.any(r.q[:, 0] >= stop)]
    if not hits:
        return -np.inf, np.inf
    return min(hits) - before, max(hits) + after


def _plot(results: dict, stop: float, path: Path) -> Path:
    """plots.plot_runs with one line per law: the first joint's series around the impact."""
    start, end = _impact_window(results, stop)
    parts = {law: r.window(start, end, r.joint_names[:1]) for law, r in results.items()}
    return plots.plot_runs(parts, path, title=f"{SCENARIO} over ROS: link position and motor torque around the impact")


def run(params_file=None, out="results/demo", laws=DEMO_LAWS, timeout: float = 60.0) -> dict:
    """Run the demo; returns the summary written to ``out/summary.json``."""
    check_env()
    start = time.perf_counter()
    params_file = Path(params_file or config.bundled()).resolve()
    out = Path(out)
    out.mkdir(parents=True, exist_ok=True)
    ctrl, sim = config.load(params_file)
    scenario = scenarios.streamed(scenarios.make(SCENARIO, sim.joints))  # the reference as ROS carries it
    dt = 1.0 / ctrl.control_rate
    summary = {"scenario": SCENARIO, "parameter_file": str(params_file), "laws": {}}
    ros_results = {}
    for law in laws:
        law_setup = dataclasses.replace(ctrl, law=law)
        ros = run_over_ros(law, params_file, out, timeout)
        offline = simulate.simulate(sim.joints, controller.bank(law_setup), scenario, control_dt=dt,
                                    substeps=sim.substeps, seed=sim.seed)
        if ros.q.shape != offline.q.shape or not np.array_equal(ros.t_cmd, ros.t):
            raise DemoError(f"{law}: {len(ros.t)} states and {len(ros.t_cmd)} commands recorded over ROS, "
                            f"{len(offline.t)} ticks offline; see {out}/{law}.*.log")
        difference = float(np.max(np.abs(ros.q - offline.q)))
        if not difference <= MAX_DIFFERENCE:
            raise DemoError(f"{law}: the run over ROS left the offline simulator's trajectory by {difference:.3g} rad "
                            f"(lock step should agree to round-off); see {out}/{law}.*.log")
        ros_results[law] = ros
        summary["laws"][law] = {
            "ros": to_dicts(joint_metrics(ros, scenario)),
            "offline": to_dicts(joint_metrics(offline, scenario)),
            "max_link_position_difference": difference,
            "max_torque_difference": float(np.max(np.abs(ros.tau_m - offline.tau_m))),
            "offline_faults": [None if f is None else f.to_dict() for f in offline.faults],
        }
    summary["plot"] = str(_plot(ros_results, sim.joints[0].plant.stop_upper, out / "impact.png"))
    summary["wall_time"] = time.perf_counter() - start
    (out / "summary.json").write_text(json.dumps(summary, indent=2))
    return summary


COLUMNS = (("peak_abs_torque", "peak |tau| N m", ".2f"), ("peak_torque_rate", "peak rate N m/s", ".0f"),
           ("max_link_position", "max q rad", ".4f"), ("max_deflection", "max |phi| rad", ".4f"),
           ("overshoot", "overshoot", ".3f"), ("settling_time_2pct", "settling s", ".3f"))


def table(summary: dict) -> str:
    """The summary as a text table: ROS and offline metrics per law, first joint.

    Overshoot and settling time appear only where they apply (a scenario with a set-point step).
    """
    rows = [(law, run_name, next(iter(entry[run_name].values())), entry)
            for law, entry in summary["laws"].items() for run_name in ("ros", "offline")]
    cols = [c for c in COLUMNS if any(m[c[0]] is not None for _, _, m, _ in rows)]
    lines = [f"{'law':<18}{'run':<9}" + "".join(f"{h:>17}" for _, h, _ in cols) + f"{'max |q_ros-q_off| rad':>23}"]
    for law, run_name, m, entry in rows:
        diff = format(entry["max_link_position_difference"], ".1e") if run_name == "ros" else ""
        lines.append(f"{law:<18}{run_name:<9}" + "".join(f"{format(m[k], fmt):>17}" for k, _, fmt in cols)
                     + f"{diff:>23}")
    return "\n".join(lines)
