"""``cdamp``: offline work on series-elastic joints or a URDF robot: simulate, analyze, tune, report, demo, keys,
check-config."""
from __future__ import annotations

import argparse
import csv
import dataclasses
import json
import os
import sys
from dataclasses import MISSING

from compliant_damping import analysis_commands, demo
from compliant_damping.command_files import is_robot, load_files
from compliant_damping.control.laws import LAW_NAMES
from compliant_damping.io import config, config_check, parameter_keys
from compliant_damping.io.metrics import joint_metrics, to_dicts
from compliant_damping.io.robot_section import describes_robot
from compliant_damping.sim import offline, robot_sim, scenarios


def _write_csv(path, result):
    cols = ("q", "dq", "theta", "dtheta", "tau_m", "tau_s")
    with open(path, "w", newline="") as fh:
        w = csv.writer(fh)
        w.writerow(["t"] + [f"{c}.{n}" for n in result.joint_names for c in cols])
        for i, t in enumerate(result.t):
            w.writerow([f"{t:.6f}"] + [repr(float(getattr(result, c)[i, j]))
                                        for j in range(len(result.joint_names)) for c in cols])


def cmd_simulate(args) -> int:
    ctrl, sim = load_files(args)
    summary_extra = {}
    robot = is_robot(ctrl, sim)
    scenario = scenarios.make(args.scenario, sim.joints, joints=args.joints, links=sim.links, floor=sim.contact)
    result = offline.run_scenario(ctrl, sim, scenario, robot, args.duration)
    if robot:
        landings = [robot_sim.touchdown(result, sim.links, c) for c in scenario.contacts]
        summary_extra["touchdowns"] = [None if d is None else {"frame": c.frame, **dataclasses.asdict(d)}
                                       for c, d in zip(scenario.contacts, landings)]
    summary = {"law": ctrl.law, "scenario": scenario.name, "sim_time": float(len(result.t) * result.control_dt),
               "wall_time": result.wall_time, "joints": to_dicts(joint_metrics(result, scenario)), **summary_extra}
    for name, fault in zip(result.joint_names, result.faults):
        summary["joints"][name]["fault"] = None if fault is None else fault.to_dict()
    if args.csv:
        _write_csv(args.csv, result)
    if args.json:
        print(json.dumps(summary, indent=2))
        return 0
    print(f"law {ctrl.law}, scenario {scenario.name}: {summary['sim_time']:.3f} s simulated "
          f"in {result.wall_time:.3f} s")
    for (name, m), fault in zip(summary["joints"].items(), result.faults):
        m = {**m, "fault": fault}
        print(f"  {name}: " + ", ".join(f"{k} {'-' if v is None else (f'{v:.4g}' if isinstance(v, float) else v)}"
                                       for k, v in m.items()))
    for d in summary.get("touchdowns", ()):
        print("  no touchdown" if d is None else
              f"  touchdown of {d['frame']} at {d['time']:.3f} s, {d['speed']:.3f} m/s towards the plane")
    return 0


def cmd_demo(args) -> int:
    """The bench knee's end-stop impact and the leg's landing over ROS (lock step) with three laws,
    each compared with the offline simulator."""
    try:
        summary = demo.run(args.config, args.out, only=args.part)
    except demo.DemoError as err:
        print(f"cdamp demo: {err}", file=sys.stderr)
        return 1
    print(demo.table(summary))
    plots = ", ".join(part["plot"] for part in summary["parts"].values())
    print(f"wrote {args.out}/summary.json and {plots} in {summary['wall_time']:.1f} s")
    return 0


def cmd_keys(args) -> int:
    """Every parameter key of both nodes, for the joints of --config (default: the bundled file).

    A node section that names a URDF (robot_section.describes_robot) gets the robot's keys: per
    joint the drive's only, the URDF gives the links.
    """
    doc = config.read(args.config or config.bundled())
    for node in (config.CONTROLLER_NODE, config.SIM_NODE):
        flat = config.node_parameters(doc, node)
        names = flat.get("joint_names", ["<joint>"])
        robot = describes_robot(flat, node)
        print(f"{node}:" + ("  # URDF robot: the URDF gives the links" if robot else ""))
        for spec in parameter_keys.parameter_specs(node, names, robot=robot):
            default = "required" if spec.default is MISSING else repr(spec.default)
            print(f"  {spec.key:<40} {spec.kind.__name__:<6} {default:<14} {spec.description}")
    return 0


def cmd_check_config(args) -> int:
    """Every problem of a parameter file (and its --layer files), one ``KEY: reason`` line each; exit 1 if any."""
    paths = [args.file] + (args.layer or [])
    problems = config_check.check_files(paths)
    if args.json:
        print(json.dumps({"files": paths, "ok": not problems,
                          "problems": [dataclasses.asdict(p) for p in problems]}, indent=2))
    else:
        for p in problems:
            print(p)
        if not problems:
            print(f"{' + '.join(paths)}: OK")
    return 1 if problems else 0




REPORT_COLUMNS = (("peak_abs_torque", "peak |tau_m| N m", ".3f"), ("peak_torque_rate", "peak rate N m/s", ".1f"),
                  ("min_link_position", "q min rad", ".4f"), ("max_link_position", "q max rad", ".4f"),
                  ("max_deflection", "max |theta-q| rad", ".4f"))


def cmd_report(args) -> int:
    """Metrics table, report.json and a PNG per run for recorded runs (CSV or rosbag2)."""
    from pathlib import Path

    from compliant_damping.io import plots, recordings
    out = Path(args.out)
    out.mkdir(parents=True, exist_ok=True)
    report, stems = {}, set()
    print(f"{'run':<24}{'joint':<12}" + "".join(f"{h:>19}" for _, h, _ in REPORT_COLUMNS))
    for run in args.runs:
        rec = recordings.read(run)
        stem = Path(run).stem
        while stem in stems:
            stem += "_"
        stems.add(stem)
        report[stem] = {"source": str(run), "plot": str(plots.plot_runs({stem: rec}, out / f"{stem}.png")),
                        "joints": to_dicts(joint_metrics(rec), step=False)}
        for joint, m in report[stem]["joints"].items():
            print(f"{stem:<24}{joint:<12}" + "".join(f"{m[k]:>19{fmt}}" for k, _, fmt in REPORT_COLUMNS))
    (out / "report.json").write_text(json.dumps(report, indent=2))
    print(f"wrote {out / 'report.json'} and {len(report)} plot(s) in {out}")
    return 0


def _file_args(p, law: bool = True):
    """--config, --layer (and --law) shared by the commands that read parameter files."""
    p.add_argument("--config", help="parameter file (default: bundled one_joint.yaml)")
    p.add_argument("--layer", action="append", metavar="FILE",
                   help="parameter file layered over --config, key by key (repeatable; e.g. config/laws/*.yaml)")
    if law:
        p.add_argument("--law", choices=LAW_NAMES, help="override the file's law")


def parser() -> argparse.ArgumentParser:
    p = argparse.ArgumentParser(prog="cdamp", description=__doc__)
    sub = p.add_subparsers(dest="command", required=True)
    s = sub.add_parser("simulate", help="run a bundled scenario on the simulated joint, print metrics")
    _file_args(s)
    s.add_argument("--scenario", choices=scenarios.SCENARIOS, default="end_stop_impact")
    s.add_argument("--joints", nargs="+", metavar="JOINT",
                   help="joints the scenario steps, rings, hits or pushes (default: all; the others hold)")
    s.add_argument("--duration", type=float, help="seconds to simulate (default: the scenario's)")
    s.add_argument("--csv", help="write the time series to this CSV file")
    s.add_argument("--json", action="store_true", help="print the metrics as JSON")
    s.set_defaults(run=cmd_simulate)
    d = sub.add_parser("demo", help="end-stop impact and leg landing over ROS with three laws, compared with the "
                                    "offline simulator")
    d.add_argument("--config", help="parameter file of the impact part (default: bundled one_joint.yaml)")
    d.add_argument("--part", choices=demo.PART_NAMES, help="run one part only (default: both)")
    d.add_argument("--out", default="results/demo", help="folder for summary.json, the plots and logs")
    d.set_defaults(run=cmd_demo)
    k = sub.add_parser("keys", help="list every parameter key with type, default, unit and meaning")
    k.add_argument("--config", help="parameter file whose joint names to use (default: bundled)")
    k.set_defaults(run=cmd_keys)
    c = sub.add_parser("check-config", help="print every problem of a parameter file (key: reason); exit 1 if any")
    c.add_argument("file", help="parameter file")
    c.add_argument("--layer", action="append", metavar="FILE", help="file layered over FILE, key by key (repeatable)")
    c.add_argument("--json", action="store_true", help="print the problems as JSON")
    c.set_defaults(run=cmd_check_config)
    a = sub.add_parser("analyze", help="linearise law + joint at the set point, continuous and sampled "
                       "(which decides): modes, static stiffness, optionally the rendered impedance")
    _file_args(a)
    a.add_argument("--joint", help="joint to analyse (default: the first; not for a URDF robot)")
    a.add_argument("--setpoint", type=float, nargs="+", metavar="Q",
                   help="link set point, rad, one per joint for a URDF robot (default: the initial positions)")
    a.add_argument("--json", action="store_true", help="print the result as JSON")
    a.add_argument("--impedance", action="store_true",
                   help="also the rendered link impedance over 0.1 Hz to half the control rate: |Z|, phase, static "
                   "stiffness, passivity of the velocity admittance (a URDF robot: each joint's diagonal entry)")
    a.add_argument("--plot", metavar="PATH", help="with --impedance: write its Bode plot here (.png or .svg)")
    a.set_defaults(run=analysis_commands.cmd_analyze)
    t = sub.add_parser("tune", help="sweep decoupled_damper's k_v: impact torque vs damping of the sampled loop, "
                       "recommend a stable one")
    _file_args(t, law=False)
    t.add_argument("--joint", help="joint to tune (default: the first)")
    t.add_argument("--kv-min", type=float, default=10.0, help="softest k_v, N m/rad (default 10)")
    t.add_argument("--kv-max", type=float, default=1.0e4, help="stiffest k_v, N m/rad (default 1e4)")
    t.add_argument("--points", type=int, default=31, help="log-spaced k_v values (default 31)")
    t.add_argument("--min-damping-ratio", type=float, default=0.4,
                   help="least damping ratio to keep (default 0.4, common practice)")
    t.add_argument("--plot", help="write a PNG of the trade-off here")
    t.add_argument("--json", action="store_true", help="print the sweep as JSON")
    t.set_defaults(run=analysis_commands.cmd_tune)
    r = sub.add_parser("report", help="metrics and plots of recorded runs: simulate --csv files or rosbag2 recordings")
    r.add_argument("runs", nargs="+", metavar="RUN", help="CSV file, rosbag2 folder or .mcap/.db3 file")
    r.add_argument("--out", default="results/report", help="folder for report.json and the plots (default results/report)")
    r.set_defaults(run=cmd_report)
    return p


def main(argv=None) -> int:
    args = parser().parse_args(argv)
    try:
        code = args.run(args)
        sys.stdout.flush()  # a reader that closed the pipe (`cdamp keys | head`) shows here
        return code
    except BrokenPipeError:  # Python docs, "Note on SIGPIPE": no traceback, no second error at exit
        os.dup2(os.open(os.devnull, os.O_WRONLY), sys.stdout.fileno())
        return 1
    except (config.ConfigError, ValueError) as err:
        print(f"cdamp: error: {err}", file=sys.stderr)
        return 2


if __name__ == "__main__":
    sys.exit(main())
