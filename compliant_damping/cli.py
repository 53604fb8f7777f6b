"""``cdamp``: offline work on series-elastic joints or a URDF robot: simulate, analyze, tune, report, demo, keys,
check-config."""
from __future__ import annotations

import argparse
import csv
import dataclasses
import json
import math
import os
import sys
from dataclasses import MISSING

import numpy as np

from compliant_damping.analysis import impedance, linear, robot_linear, sampled, tuning
from compliant_damping.control import controller
from compliant_damping.control.laws import LAW_NAMES, make_law
from compliant_damping.io import config, config_check, parameter_keys
from compliant_damping.io.metrics import joint_metrics, to_dicts
from compliant_damping.io.robot_section import describes_robot
from compliant_damping.sim import robot_sim, scenarios, simulate


def _load(args):
    """(ControllerSetup, SimSetup) from --config (default: the bundled one-joint file), --layer files and --law."""
    paths = [args.config or config.bundled()] + (getattr(args, "layer", None) or [])
    ctrl = config.layered_parameters(paths, config.CONTROLLER_NODE)
    if getattr(args, "law", None):
        ctrl["law"] = args.law
    return config.controller_setup(ctrl), config.sim_setup(config.layered_parameters(paths, config.SIM_NODE))


def _write_csv(path, result):
    cols = ("q", "dq", "theta", "dtheta", "tau_m", "tau_s")
    with open(path, "w", newline="") as fh:
        w = csv.writer(fh)
        w.writerow(["t"] + [f"{c}.{n}" for n in result.joint_names for c in cols])
        for i, t in enumerate(result.t):
            w.writerow([f"{t:.6f}"] + [repr(float(getattr(result, c)[i, j]))
                                        for j in range(len(result.joint_names)) for c in cols])


def _is_robot(ctrl, sim) -> bool:
    """True when either node's section names a URDF: the run is a robot with coupled links."""
    if ctrl.urdf_source is None and sim.urdf_source is None:
        return False
    if ctrl.joint_names != sim.joint_names:
        raise ValueError(f"joint_names: the controller's {ctrl.joint_names} and the simulated robot's "
                         f"{sim.joint_names} must be the same joints in the same order")
    return True


def cmd_simulate(args) -> int:
    ctrl, sim = _load(args)
    dt = 1.0 / ctrl.control_rate
    summary_extra = {}
    if _is_robot(ctrl, sim):
        scenario = scenarios.make(args.scenario, sim.joints, joints=args.joints, links=sim.links, floor=sim.contact)
        result = robot_sim.simulate_robot(robot_sim.robot_plant(sim, scenario), controller.robot(ctrl), scenario,
                                          args.duration, control_dt=dt, substeps=sim.substeps,
                                          sensors=[j.sensor for j in sim.joints], seed=sim.seed)
        landings = [robot_sim.touchdown(result, sim.links, c) for c in scenario.contacts]
        summary_extra["touchdowns"] = [None if d is None else {"frame": c.frame, **dataclasses.asdict(d)}
                                       for c, d in zip(scenario.contacts, landings)]
    else:
        scenario = scenarios.make(args.scenario, sim.joints, joints=args.joints)
        result = simulate.simulate(sim.joints, controller.bank(ctrl), scenario, args.duration,
                                   control_dt=dt, substeps=sim.substeps, seed=sim.seed)
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
    """End-stop impact over ROS (lock step) with three laws, compared with the offline simulator."""
    from compliant_damping import demo
    try:
        summary = demo.run(args.config, args.out)
    except demo.DemoError as err:
        print(f"cdamp demo: {err}", file=sys.stderr)
        return 1
    print(demo.table(summary))
    print(f"wrote {args.out}/summary.json and {summary['plot']} in {summary['wall_time']:.1f} s")
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


def _joint(args, ctrl, sim):
    """(ControllerJoint, SimJoint) named by --joint (default: the first joint)."""
    name = args.joint or ctrl.joint_names[0]
    if name not in ctrl.joint_names or name not in sim.joint_names:
        raise ValueError(f"joint: {name!r} is not in both nodes' joint_names")
    return ctrl.joints[ctrl.joint_names.index(name)], sim.joints[sim.joint_names.index(name)]


def _modes_json(result):
    return [{"frequency_hz": m.frequency_hz, "damping_ratio": m.damping_ratio, "link_share": m.link_share}
            for m in result.modes]


def _setpoint(args, sim):
    """Set point per joint (rad): --setpoint values, default the joints' initial positions."""
    q_d = [j.initial_position for j in sim.joints] if args.setpoint is None else list(args.setpoint)
    if len(q_d) != len(sim.joints):
        raise ValueError(f"setpoint: {len(q_d)} value(s) given for {len(sim.joints)} joint(s) {sim.joint_names}")
    return q_d


def _finite(v: float):
    """``v``, or None where it is not finite (JSON has no infinity)."""
    return v if math.isfinite(v) else None


def _sampled_json(res) -> dict:
    """The sampled loop's verdict, eigenvalues and modes (sampled.SampledAnalysis) for --json."""
    return {"control_rate_hz": res.control_rate, "period": res.map.period, "substeps": res.map.substeps,
            "delay_ticks": list(res.map.delay_ticks), "stable": res.stable, "spectral_radius": res.spectral_radius,
            "eigenvalues": [[float(z.real), float(z.imag)] for z in res.eigenvalues],
            "modes": [{"z": [m.z.real, m.z.imag], "magnitude": m.magnitude, "frequency_hz": _finite(m.frequency_hz),
                       "damping_ratio": m.damping_ratio, "link_share": m.link_share,
                       "joint_shares": m.joint_shares.tolist()} for m in res.modes],
            "dominant_mode": res.modes.index(res.dominant), "least_damped_mode": res.modes.index(res.least_damped)}


def _print_sampled(res, joint_names) -> None:
    """The sampled loop's table and the verdict that decides."""
    delays = ", ".join(str(d) for d in res.map.delay_ticks)
    print(f"  sampled at {res.control_rate:g} Hz decides: {'stable' if res.stable else 'UNSTABLE'} "
          f"(one-period map: {res.map.substeps} RK4 substeps, torque held, sensor delay {delays} tick(s); "
          f"max |z| = {res.spectral_radius:.6f})")
    shares = f"  joint shares ({', '.join(joint_names)})" if len(joint_names) > 1 else ""
    print(f"  {'mode':<6}{'|z|':>10}{'f_n Hz':>9}{'zeta':>8}{'link share':>12}{shares}")
    for i, m in enumerate(res.modes):
        tag = (" dominant" if m is res.dominant else "") + (" least damped" if m is res.least_damped else "")
        tag += "" if m.stable else " GROWS"
        row = " ".join(f"{v:5.2f}" for v in m.joint_shares) if shares else ""
        print(f"  {i:<6}{m.magnitude:>10.6f}{m.frequency_hz:>9.3f}{m.damping_ratio:>8.3f}{m.link_share:>12.2f}"
              f"{'  ' + row if row else ''}{tag}")


def _impedance_request(args):
    """The frequency grid (Hz) for --impedance, or None without it; checks --plot's path first."""
    if args.plot and not args.impedance:
        raise ValueError("plot: --plot draws the rendered impedance; add --impedance")
    if args.plot:
        from compliant_damping.io import plots
        plots.bode_format(args.plot)
    return args.impedance


def _impedance_json(imp) -> dict:
    """One rendered impedance (impedance.RenderedImpedance) for --json: the whole grid and the verdicts."""
    p = imp.passivity
    return {"frequency_hz": imp.frequency_hz.tolist(), "magnitude": imp.magnitude.tolist(),
            "phase_deg": imp.phase_deg.tolist(),
            "admittance": [[float(y.real), float(y.imag)] for y in imp.admittance],
            "static_stiffness": imp.static_stiffness,
            "passivity": {"passive": p.passive, "worst_frequency_hz": p.worst_frequency_hz,
                          "worst_real_part": p.worst_real_part, "tolerance": p.tolerance}}


def _print_impedance(imp, label: str, rows: int = 7) -> None:
    """A few frequencies of the grid (|Z|, phase), the static stiffness and the passivity verdict."""
    f = imp.frequency_hz
    print(f"  rendered link impedance {label} (continuous loop, {f[0]:g} Hz to {f[-1]:g} Hz = half the control "
          "rate)")
    print(f"  {'f Hz':>10}{'|Z| N m/rad':>14}{'phase deg':>11}")
    for i in np.unique(np.round(np.linspace(0, len(f) - 1, rows)).astype(int)):
        print(f"  {f[i]:>10.4g}{imp.magnitude[i]:>14.5g}{imp.phase_deg[i]:>11.2f}")
    p = imp.passivity
    verdict = "passive" if p.passive else "NOT passive"
    print(f"  static stiffness {imp.static_stiffness:.4f} N m/rad; velocity admittance {verdict} over the range "
          f"(worst Re Y_v = {p.worst_real_part:.3e} rad/(N m s) at {p.worst_frequency_hz:.4g} Hz)")


def _plot_impedance(args, curves: dict, title: str) -> None:
    """--plot: the Bode plot of ``curves`` (written before any output, so a failing plot prints nothing)."""
    from compliant_damping.io import plots
    plots.plot_impedance(curves, args.plot, title)


def cmd_analyze(args) -> int:
    """Closed-loop modes at the set point (Coulomb off), continuous and sampled at the file's control rate: one
    joint, or the whole robot with a URDF. The sampled loop decides."""
    ctrl, sim = _load(args)
    wants_impedance = _impedance_request(args)
    if _is_robot(ctrl, sim):
        return _analyze_robot(args, ctrl, sim)
    cj, sj = _joint(args, ctrl, sim)
    q_d = sj.initial_position if args.setpoint is None else args.setpoint[0]
    law = make_law(ctrl.law, cj.model, cj.gains)
    res = linear.analyze(sj.plant, law, q_d)
    dt = 1.0 / ctrl.control_rate
    disc = sampled.analyze_joint(sj.plant, law, q_d, control_dt=dt, substeps=sim.substeps,
                                 delay=sampled.delay_ticks(sj.sensor.delay, dt))
    imp = impedance.rendered_impedance(res.linear, impedance.frequency_grid(ctrl.control_rate)) \
        if wants_impedance else None
    if args.plot:
        _plot_impedance(args, {f"{ctrl.law}, {cj.name}": imp}, f"rendered link impedance at q_d = {q_d:g} rad")
    if args.json:
        extra = {} if imp is None else {"impedance": {"joint": cj.name, **_impedance_json(imp)}}
        print(json.dumps({
            "law": ctrl.law, "joint": cj.name, "setpoint": q_d,
            "poles": [[float(p.real), float(p.imag)] for p in res.poles],
            "modes": _modes_json(res),
            "dominant_mode": res.modes.index(res.dominant),
            "least_damped_mode": res.modes.index(res.least_damped),
            "static_link_stiffness": res.static_link_stiffness,
            "continuous_stable": res.stable, "decided_by": "sampled", "sampled": _sampled_json(disc), **extra},
            indent=2))
        return 0
    print(f"law {ctrl.law}, joint {cj.name}, set point {q_d:g} rad (linearised, Coulomb friction off)")
    print(f"  continuous view: {'stable' if res.stable else 'UNSTABLE'}")
    print(f"  {'mode':<6}{'f_n Hz':>9}{'zeta':>8}{'link share':>12}")
    for i, m in enumerate(res.modes):
        tag = (" dominant" if m is res.dominant else "") + (" least damped" if m is res.least_damped else "")
        print(f"  {i:<6}{m.frequency_hz:>9.3f}{m.damping_ratio:>8.3f}{m.link_share:>12.2f}{tag}")
    print(f"  static link stiffness {res.static_link_stiffness:.2f} N m/rad; "
          f"2 % settling estimate 4/(zeta w_n) = {4.0 / res.dominant.decay_rate:.3f} s")
    _print_sampled(disc, [cj.name])
    if imp is not None:
        _print_impedance(imp, f"of {cj.name}")
    if args.plot:
        print(f"  wrote {args.plot}")
    return 0


def _analyze_robot(args, ctrl, sim) -> int:
    """The coupled closed loop of a URDF robot: poles, modes with joint shares, rendered link stiffness, and the
    sampled loop at the file's control rate, which decides."""
    if args.joint:
        raise ValueError("joint: a robot with coupled links is analysed as a whole; drop --joint")
    q_d = _setpoint(args, sim)
    law = make_law(ctrl.law, controller.chain_nominal(ctrl), controller.stack_gains([j.gains for j in ctrl.joints]))
    lin = robot_linear.linearize_robot(robot_sim.robot_plant(sim), law, q_d)
    modes = robot_linear.robot_modes(lin)
    poles = np.linalg.eigvals(lin.a)
    least = min(modes, key=lambda m: m.damping_ratio)
    stiffness = robot_linear.rendered_link_stiffness(lin)
    stable = bool(np.all(poles.real < 0.0))
    dt = 1.0 / ctrl.control_rate
    disc = sampled.analyze_robot(robot_sim.robot_plant(sim), law, q_d, control_dt=dt, substeps=sim.substeps,
                                 delays=[sampled.delay_ticks(j.sensor.delay, dt) for j in sim.joints])
    grid = impedance.frequency_grid(ctrl.control_rate)
    diagonal = dict(zip(ctrl.joint_names, impedance.robot_impedance(lin, grid))) if args.impedance else {}
    if args.plot:
        _plot_impedance(args, diagonal, f"{ctrl.law}: rendered link impedance, diagonal q_j / tau_ext,j")
    if args.json:
        extra = {"impedance": {"kind": "diagonal", "joints": {name: _impedance_json(imp) for name, imp in
                                                              diagonal.items()}}} if diagonal else {}
        print(json.dumps({
            "law": ctrl.law, "joints": ctrl.joint_names, "setpoint": q_d, "stable": stable,
            "poles": [[float(p.real), float(p.imag)] for p in poles],
            "modes": [{"frequency_hz": m.frequency_hz, "damping_ratio": m.damping_ratio,
                       "joint_shares": m.joint_shares.tolist()} for m in modes],
            "least_damped_mode": modes.index(least),
            "rendered_link_stiffness": stiffness.tolist(),
            "decided_by": "sampled", "sampled": _sampled_json(disc), **extra}, indent=2))
        return 0
    print(f"law {ctrl.law}, robot {', '.join(ctrl.joint_names)} at {', '.join(f'{q:g}' for q in q_d)} rad "
          "(linearised, Coulomb friction off)")
    print(f"  continuous view: {'stable' if stable else 'UNSTABLE'}")
    print(f"  {'mode':<6}{'f_n Hz':>9}{'zeta':>8}  joint shares ({', '.join(ctrl.joint_names)})")
    for i, m in enumerate(modes):
        print(f"  {i:<6}{m.frequency_hz:>9.3f}{m.damping_ratio:>8.3f}  "
              + " ".join(f"{s:5.2f}" for s in m.joint_shares) + (" least damped" if m is least else ""))
    print("  rendered link stiffness (N m/rad):")
    for row in stiffness:
        print("    " + " ".join(f"{v:11.2f}" for v in row))
    _print_sampled(disc, ctrl.joint_names)
    for name, imp in diagonal.items():
        _print_impedance(imp, f"at {name} (diagonal entry q/tau_ext; the other joints move under the loop)")
    if args.plot:
        print(f"  wrote {args.plot}")
    return 0


def _tuning_boundary(points, cj, sj, control_dt, substeps):
    """(first unstable k_v of the sweep, the boundary bisected below it) in N m/rad, None where there is none."""
    bad = tuning.first_unstable(points)
    if bad is None:
        return None, None
    below = [p for p in points if p.stable and p.decoupling_stiffness < bad.decoupling_stiffness]
    if not below:
        return bad.decoupling_stiffness, None
    edge = max(below, key=lambda p: p.decoupling_stiffness).decoupling_stiffness
    return bad.decoupling_stiffness, tuning.stability_boundary(cj, sj, edge, bad.decoupling_stiffness,
                                                               control_dt=control_dt, substeps=substeps)


def cmd_tune(args) -> int:
    """Sweep k_v of decoupled_damper: impact torque rate and peak vs the least-damped mode of the loop sampled at
    the file's control rate; mark unstable points, report where stability ends, recommend a stable one."""
    from tqdm import tqdm

    from compliant_damping.io import plots
    ctrl, sim = _load(args)
    cj, sj = _joint(args, ctrl, sim)
    grid = tuning.log_grid(args.kv_min, args.kv_max, args.points)
    dt = 1.0 / ctrl.control_rate
    with tqdm(total=len(grid), desc="k_v sweep", unit="k_v", file=sys.stderr, disable=args.json) as bar:
        points = tuning.sweep_decoupling_stiffness(cj, sj, grid, control_dt=dt, substeps=sim.substeps,
                                                   progress=lambda _: bar.update())
    best = tuning.recommend(points, args.min_damping_ratio)
    first_bad, boundary = _tuning_boundary(points, cj, sj, dt, sim.substeps)
    if args.plot:
        plots.plot_tuning(points, best, args.min_damping_ratio, cj.limits, args.plot)
    if args.json:
        print(json.dumps({"law": tuning.LAW, "joint": cj.name, "min_damping_ratio": args.min_damping_ratio,
                          "limits": {"torque": cj.limits.torque, "torque_rate": cj.limits.torque_rate},
                          "points": [dataclasses.asdict(p) for p in points],
                          "recommended_decoupling_stiffness": None if best is None else best.decoupling_stiffness,
                          "judged_on": "sampled", "control_rate_hz": ctrl.control_rate, "substeps": sim.substeps,
                          "first_unstable_decoupling_stiffness": first_bad,
                          "stability_boundary_decoupling_stiffness": boundary}, indent=2))
        return 0
    print(f"decoupled_damper on {cj.name}: end_stop_impact vs least-damped mode of the loop sampled at "
          f"{ctrl.control_rate:g} Hz (limits {cj.limits.torque:g} N m, {cj.limits.torque_rate:g} N m/s)")
    print(f"{'k_v N m/rad':>12}{'peak rate N m/s':>17}{'peak |tau| N m':>16}{'zeta':>7}{'f_n Hz':>8}"
          f"{'link share':>11}{'max |z|':>10}{'zeta cont':>10}  limits  sampled loop")
    for p in points:
        mark = " <- recommended" if p is best else ""
        print(f"{p.decoupling_stiffness:>12.4g}{p.peak_torque_rate:>17.0f}{p.peak_torque:>16.2f}"
              f"{p.damping_ratio:>7.3f}{p.mode_frequency_hz:>8.2f}{p.link_share:>11.2f}{p.spectral_radius:>10.5f}"
              f"{p.continuous_damping_ratio:>10.3f}  {'ok ' if p.within_limits else 'HIT'}     "
              f"{'stable' if p.stable else 'UNSTABLE'}{mark}")
    if first_bad is None:
        print(f"the sampled loop is stable over the whole range at {ctrl.control_rate:g} Hz")
    else:
        edge = "" if boundary is None else f"; stability ends at k_v = {boundary:.4g} N m/rad (bisected)"
        print(f"at {ctrl.control_rate:g} Hz the sampled loop is unstable from k_v = {first_bad:.4g} N m/rad "
              f"of the sweep on{edge}")
    if best is None:
        print(f"no k_v in the range keeps a stable sampled loop with zeta >= {args.min_damping_ratio} "
              "within the limits")
    else:
        print(f"recommended: decoupling_stiffness {best.decoupling_stiffness:.4g} N m/rad (softest with a stable "
              f"sampled loop, zeta >= {args.min_damping_ratio}, common practice, and inside the torque and slew "
              "limits)")
    return 0


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
    d = sub.add_parser("demo", help="end-stop impact over ROS with three laws, compared with the offline simulator")
    d.add_argument("--config", help="parameter file (default: bundled one_joint.yaml)")
    d.add_argument("--out", default="results/demo", help="folder for summary.json, impact.png and logs")
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
    a.set_defaults(run=cmd_analyze)
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
    t.set_defaults(run=cmd_tune)
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
