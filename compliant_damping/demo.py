"""``cdamp demo``: impacts over ROS with three laws, each compared with the offline simulator.

Two parts, each a :class:`Part` (parameter files, scenario, the laws with their layer files):

* ``impact``: the bench knee (config/one_joint.yaml) hits its end stop (end_stop_impact);
* ``landing``: the bundled three-joint leg (config/compliant_leg.yaml, a URDF robot) lands on a
  floor that rises into its foot (foot_landing; link_damping with its gains from
  config/leg_laws/link_damping.yaml).

Per law, three processes on loopback DDS (the environment must say so; see :func:`check_env`):
the simulated robot in lock step, the controller on sim time with that law, and the scenario
player, which activates the controller, sends the scenario's motion on ``link_trajectory`` (the
spline through its positions every 5 ms, scenarios.streamed), records ``joint_states`` and
``motor_effort`` and paces the loop (the robot takes its commands from the player on
config.PACED_EFFORT, see nodes/scenario_player.py). A rising floor goes to the simulated robot as
its ``contact.rise_*`` settings. The same streamed scenario then runs offline
(sim.offline.run_scenario); a ROS run that leaves it by more than MAX_DIFFERENCE fails the demo.
Both runs are runs.Run, summarised by metrics.joint_metrics. Writes ``summary.json``, the
processes' logs and per part a plot (link position and motor torque around the impact, one
trace per law; per joint for the leg) to the output folder. No ROS imports here: the ROS work
happens in the child processes.
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

from compliant_damping.command_files import is_robot
from compliant_damping.io import config, plots, recordings
from compliant_damping.io.metrics import joint_metrics, to_dicts
from compliant_damping.io.runs import Run
from compliant_damping.sim import offline, scenarios

DEMO_LAWS = ("motor_pd", "link_damping", "decoupled_damper")
PART_NAMES = ("impact", "landing")
MAX_DIFFERENCE = 1e-9  # rad: ROS in lock step against the offline simulator (measured about 1e-14)
LOOPBACK_ENV = {"ROS_AUTOMATIC_DISCOVERY_RANGE": "LOCALHOST", "ROS_LOCALHOST_ONLY": "1"}


@dataclasses.dataclass(frozen=True)
class Part:
    """One part of the demo: ``scenario`` on the robot of ``files`` (layered), per law in ``laws``
    the extra layer files that give its gains; ``plot`` names the PNG written."""

    name: str
    files: tuple
    scenario: str
    laws: dict
    plot: str


def parts(impact_file=None) -> tuple:
    """The demo's parts: the bench knee's end-stop impact (``impact_file``, default the bundled
    one_joint.yaml) and the bundled leg's landing."""
    leg_link_damping = (str(config.bundled("leg_laws/link_damping.yaml")),)
    return (Part(PART_NAMES[0], (str(Path(impact_file or config.bundled()).resolve()),), "end_stop_impact",
                 {law: () for law in DEMO_LAWS}, "impact.png"),
            Part(PART_NAMES[1], (str(config.bundled("compliant_leg.yaml")),), "foot_landing",
                 {"motor_pd": (), "link_damping": leg_link_damping, "decoupled_damper": ()}, "landing.png"))


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


def namespaced_file(params_files, ns: str, path: Path, overrides: dict | None = None) -> Path:
    """Both nodes' sections of ``params_files`` (one path or several, layered) under ``ns`` (a
    parameter file names nodes by full name), with ``overrides`` ({node: {dotted key: value}}) on top."""
    files = [params_files] if isinstance(params_files, (str, Path)) else list(params_files)
    sections = {}
    for node in (config.CONTROLLER_NODE, config.SIM_NODE):
        tree: dict = {}
        for key, value in {**config.layered_parameters(files, node), **(overrides or {}).get(node, {})}.items():
            *parents, leaf = key.split(".")
            branch = tree
            for part in parents:
                branch = branch.setdefault(part, {})
            branch[leaf] = value
        sections[f"{ns}/{node}"] = {"ros__parameters": tree}
    path.write_text(yaml.safe_dump(sections, sort_keys=False))
    return path


def run_over_ros(label: str, files, overrides: dict, scenario: str, out: Path, timeout: float) -> Run:
    """One lock-step run of ``scenario`` with the nodes of ``files`` (layered) and ``overrides``
    (namespaced_file: the law, the run's floor), as the player recorded it (source ``"ros"``)."""
    ns = f"/cdamp_demo_{os.getpid()}"  # own namespace, /clock and /diagnostics in it: other runs stay apart
    ros_args = ["--ros-args", "-r", f"__ns:={ns}", "-r", f"/clock:={ns}/clock", "-r", f"/diagnostics:={ns}/diagnostics"]
    node_file = namespaced_file(files, ns, out / f"{label}.parameters.yaml", overrides)
    commands = {
        "simulated_joint": module("simulated_joint_node", *ros_args, "--params-file", str(node_file),
                                  "-p", "lock_step:=true", "-r", f"motor_effort:={config.PACED_EFFORT}"),
        "controller": module("controller_node", *ros_args, "--params-file", str(node_file), "-p", "use_sim_time:=true"),
    }
    record = out / f"{label}.npz"
    procs = {}
    try:
        start(commands, out / label, procs)
        player = subprocess.run(module("scenario_player", "--config", str(node_file), "--scenario", scenario,
                                       "--timeout", str(timeout), "--out", str(record), *ros_args),
                                stdout=open(out / f"{label}.player.log", "w"), stderr=subprocess.STDOUT,
                                timeout=timeout + 30.0)
    finally:
        for proc in procs.values():
            stop(proc)
    if player.returncode != 0:
        raise DemoError(f"{label}: the scenario player failed (exit {player.returncode}); see {out}/{label}.*.log")
    return dataclasses.replace(recordings.read_npz(record), source="ros")


def run_part(part: Part, out: Path, timeout: float = 60.0) -> dict:
    """Each law of ``part`` over ROS and offline; the part's summary (and its plot in ``out``)."""
    summary = {"scenario": part.scenario, "parameter_files": list(part.files), "laws": {}}
    ros_results = {}
    for law, layers in part.laws.items():
        files = [*part.files, *layers]
        ctrl = config.controller_setup({**config.layered_parameters(files, config.CONTROLLER_NODE), "law": law})
        sim = config.sim_setup(config.layered_parameters(files, config.SIM_NODE))
        scenario = scenarios.streamed(scenarios.make(part.scenario, sim.joints, links=sim.links, floor=sim.contact))
        floor = {key: value for c in scenario.contacts for key, value in config.contact_parameters(c).items()}
        label = f"{part.name}_{law}"
        ros = run_over_ros(label, files, {config.CONTROLLER_NODE: {"law": law}, config.SIM_NODE: floor},
                           part.scenario, out, timeout)
        reference = offline.run_scenario(ctrl, sim, scenario, is_robot(ctrl, sim))
        if ros.q.shape != reference.q.shape or not np.array_equal(ros.t_cmd, ros.t):
            raise DemoError(f"{label}: {len(ros.t)} states and {len(ros.t_cmd)} commands recorded over ROS, "
                            f"{len(reference.t)} ticks offline; see {out}/{label}.*.log")
        difference = float(np.max(np.abs(ros.q - reference.q)))
        if not difference <= MAX_DIFFERENCE:
            raise DemoError(f"{label}: the run over ROS left the offline simulator's trajectory by {difference:.3g} rad "
                            f"(lock step should agree to round-off); see {out}/{label}.*.log")
        ros_results[law] = ros
        summary["laws"][law] = {
            "ros": to_dicts(joint_metrics(ros, scenario)),
            "offline": to_dicts(joint_metrics(reference, scenario)),
            "max_link_position_difference": difference,
            "max_torque_difference": float(np.max(np.abs(ros.tau_m - reference.tau_m))),
            "offline_faults": [None if f is None else f.to_dict() for f in reference.faults],
        }
    summary["plot"] = str(_plot(part, ros_results, out / part.plot))
    return summary


def _plot(part: Part, results: dict, path: Path) -> Path:
    """The runs around the impact: from 0.1 s before the largest one-tick torque change of any joint
    (the earliest over the laws) to 0.3 s after the latest, one trace per law, a column per joint."""
    peaks = [r.t_cmd[1:][np.argmax(np.abs(np.diff(r.tau_m, axis=0)).max(axis=1))] for r in results.values()]
    parts_ = {law: r.window(min(peaks) - 0.1, max(peaks) + 0.3) for law, r in results.items()}
    return plots.plot_per_joint(parts_, path, title=f"{part.scenario} over ROS: link position and motor torque")


def run(params_file=None, out="results/demo", timeout: float = 60.0, only: str | None = None) -> dict:
    """Run the demo's parts (``only``: one of them by name); returns the summary written to ``out/summary.json``."""
    check_env()
    start_time = time.perf_counter()
    out = Path(out)
    out.mkdir(parents=True, exist_ok=True)
    summary = {"parts": {p.name: run_part(p, out, timeout) for p in parts(params_file) if only in (None, p.name)}}
    summary["wall_time"] = time.perf_counter() - start_time
    (out / "summary.json").write_text(json.dumps(summary, indent=2))
    return summary


COLUMNS = (("peak_abs_torque", "peak |tau| N m", ".2f"), ("peak_torque_rate", "peak rate N m/s", ".0f"),
           ("max_link_position", "max q rad", ".4f"), ("max_deflection", "max |phi| rad", ".4f"),
           ("overshoot", "overshoot", ".3f"), ("settling_time_2pct", "settling s", ".3f"))


def table(summary: dict) -> str:
    """The summary as text: per part, the ROS metrics per law and joint, with the largest link
    position difference to the offline run (whose metrics are in summary.json).

    Overshoot and settling time appear only where they apply (a scenario with a set-point step).
    """
    blocks = []
    for name, part in summary["parts"].items():
        rows = [(law, joint, m, entry) for law, entry in part["laws"].items() for joint, m in entry["ros"].items()]
        cols = [c for c in COLUMNS if any(m[c[0]] is not None for _, _, m, _ in rows)]
        lines = [f"{name}: {part['scenario']} over ROS (plot {part['plot']})",
                 f"{'law':<18}{'joint':<13}" + "".join(f"{h:>17}" for _, h, _ in cols) + f"{'max |q_ros-q_off| rad':>23}"]
        for law, joint, m, entry in rows:
            lines.append(f"{law:<18}{joint:<13}" + "".join(f"{format(m[k], fmt):>17}" for k, _, fmt in cols)
                         + f"{format(entry['max_link_position_difference'], '.1e'):>23}")
        blocks.append("\n".join(lines))
    return "\n\n".join(blocks)
