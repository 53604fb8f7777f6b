"""`cdamp analyze` and `cdamp tune`: the linearised loop (continuous and sampled), rendered impedance,
and the decoupling-spring sweep, printed for people or as JSON."""
from __future__ import annotations

import dataclasses
import json
import math
import sys

import numpy as np

from compliant_damping.analysis import impedance, linear, robot_linear, sampled, tuning
from compliant_damping.command_files import is_robot, load_files
from compliant_damping.control import controller
from compliant_damping.control.laws import make_law
from compliant_damping.sim import robot_sim

__all__ = ["cmd_analyze", "cmd_tune"]


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
    ctrl, sim = load_files(args)
    wants_impedance = _impedance_request(args)
    if is_robot(ctrl, sim):
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
    ctrl, sim = load_files(args)
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
