"""Plots of runs (runs.Run), tuning sweeps and rendered impedances, written with matplotlib's Agg backend
(PNG; the impedance's Bode plot also as SVG)."""
from __future__ import annotations

from pathlib import Path

import numpy as np

__all__ = ["BODE_FORMATS", "bode_format", "plot_impedance", "plot_per_joint", "plot_runs", "plot_tuning"]

BODE_FORMATS = ("png", "svg")


def _pyplot():
    """matplotlib.pyplot on the file-only Agg backend (imported late: plotting is optional work)."""
    import matplotlib
    matplotlib.use("Agg")
    import matplotlib.pyplot as plt
    return plt


def _label(run_label: str, joint: str, runs: dict) -> str:
    """A line's legend entry: the joint of a single run, the run of single-joint runs, else both."""
    if len(runs) == 1:
        return joint
    return run_label if all(len(r.joint_names) == 1 for r in runs.values()) else f"{run_label} {joint}"


def plot_runs(runs: dict, path, title: str | None = None) -> Path:
    """Link position, spring deflection and motor torque against time, one line per run and joint.

    runs: ``{label: runs.Run}`` (states against ``t``, commands as steps against ``t_cmd``); path: PNG
    file to write (its folder must exist); title: default the runs' sources. Returns the path.
    """
    plt = _pyplot()
    fig, (ax_q, ax_phi, ax_tau) = plt.subplots(3, 1, sharex=True, figsize=(8, 7))
    for run_label, run in runs.items():
        for j, joint in enumerate(run.joint_names):
            label = _label(run_label, joint, runs)
            ax_q.plot(run.t, run.q[:, j], label=label)
            ax_phi.plot(run.t, run.theta[:, j] - run.q[:, j], label=label)
            ax_tau.step(run.t_cmd, run.tau_m[:, j], where="post", label=label)
    ax_q.set_ylabel("link position q (rad)")
    ax_phi.set_ylabel("deflection theta - q (rad)")
    ax_tau.set_ylabel("motor torque (N m)")
    ax_tau.set_xlabel("time (s)")
    for ax in (ax_q, ax_phi, ax_tau):
        ax.grid(True, alpha=0.3)
    ax_q.legend(loc="best", fontsize="small")
    fig.suptitle(title or ", ".join(r.source for r in runs.values()))
    fig.tight_layout()
    fig.savefig(path, dpi=100)
    plt.close(fig)
    return Path(path)


def plot_per_joint(runs: dict, path, title: str) -> Path:
    """Link position and motor torque against time, a column per joint, one line per run in each.

    runs: ``{label: runs.Run}`` over the same joints; path: PNG file to write (its folder must
    exist). Returns the path.
    """
    plt = _pyplot()
    joints = next(iter(runs.values())).joint_names
    fig, axes = plt.subplots(2, len(joints), sharex=True, squeeze=False, figsize=(4.0 * len(joints) + 1.0, 5.5))
    for j, joint in enumerate(joints):
        ax_q, ax_tau = axes[:, j]
        for run_label, run in runs.items():
            ax_q.plot(run.t, run.q[:, j], label=run_label)
            ax_tau.step(run.t_cmd, run.tau_m[:, j], where="post", label=run_label)
        ax_q.set_title(joint)
        ax_tau.set_xlabel("time (s)")
        for ax in (ax_q, ax_tau):
            ax.grid(True, alpha=0.3)
    axes[0, 0].set_ylabel("link position q (rad)")
    axes[1, 0].set_ylabel("motor torque (N m)")
    axes[0, 0].legend(loc="best", fontsize="small")
    fig.suptitle(title)
    fig.tight_layout()
    fig.savefig(path, dpi=100)
    plt.close(fig)
    return Path(path)


def plot_tuning(points, best, min_zeta, limits, path) -> Path:
    """Two panels over k_v: impact peak torque rate and the sampled loop's least-damped damping ratio
    (tuning.sweep points; unstable points crossed out)."""
    plt = _pyplot()
    kv = [p.decoupling_stiffness for p in points]
    fig, (top, bottom) = plt.subplots(2, 1, sharex=True, figsize=(6.0, 5.0))
    top.loglog(kv, [p.peak_torque_rate for p in points], "o-")
    top.axhline(limits.torque_rate, color="r", ls="--", label="slew limit")
    top.set_ylabel("impact peak |dtau_m/dt| (N m/s)")
    top.legend()
    bottom.semilogx(kv, [p.damping_ratio for p in points], "o-", label="sampled loop")
    bad = [p for p in points if not p.stable]
    if bad:
        bottom.plot([p.decoupling_stiffness for p in bad], [p.damping_ratio for p in bad], "rx", ms=9,
                    label="unstable (sampled)")
    bottom.axhline(min_zeta, color="r", ls="--", label=f"zeta = {min_zeta}")
    if best is not None:
        for ax in (top, bottom):
            ax.axvline(best.decoupling_stiffness, color="g", ls=":")
    bottom.set_xlabel("decoupling stiffness k_v (N m/rad)")
    bottom.set_ylabel("least-damped zeta (sampled)")
    bottom.legend()
    fig.tight_layout()
    fig.savefig(path, dpi=120)
    plt.close(fig)
    return Path(path)


def bode_format(path) -> str:
    """The file format of a Bode plot path, from its extension: ``png`` or ``svg``; ValueError for any other."""
    fmt = Path(path).suffix.lower().lstrip(".")
    if fmt not in BODE_FORMATS:
        raise ValueError(f"plot: {str(path)!r} must end in {' or '.join('.' + f for f in BODE_FORMATS)}")
    return fmt


def plot_impedance(curves: dict, path, title: str) -> Path:
    """Bode plot of rendered link impedances: |Z| (N m/rad, log-log) and phase (deg) against frequency (Hz).

    curves: ``{label: impedance.RenderedImpedance}``, one line each, the static stiffness dotted; the worst
    passivity frequency is marked with an x on the phase. path: ``.png`` or ``.svg`` (:func:`bode_format`).
    """
    fmt = bode_format(path)
    plt = _pyplot()
    fig, (ax_mag, ax_phase) = plt.subplots(2, 1, sharex=True, figsize=(7.0, 6.0))
    for label, imp in curves.items():
        line, = ax_mag.loglog(imp.frequency_hz, imp.magnitude, label=label)
        if imp.static_stiffness > 0.0:
            ax_mag.axhline(imp.static_stiffness, color=line.get_color(), ls=":", lw=0.8)
        ax_phase.semilogx(imp.frequency_hz, imp.phase_deg, color=line.get_color(), label=label)
        worst = imp.passivity.worst_frequency_hz
        if not imp.passivity.passive:
            ax_phase.plot([worst], [float(np.interp(worst, imp.frequency_hz, imp.phase_deg))], "x",
                          color=line.get_color(), ms=9, label=f"{label}: not passive, worst {worst:.3g} Hz")
    ax_mag.set_ylabel("|Z| = |tau_ext / q| (N m/rad)")
    ax_phase.set_ylabel("phase of Z (deg)")
    ax_phase.set_xlabel("frequency (Hz)")
    for ax in (ax_mag, ax_phase):
        ax.grid(True, which="both", alpha=0.3)
    ax_mag.legend(loc="best", fontsize="small")
    ax_phase.legend(loc="best", fontsize="small")
    fig.suptitle(title)
    fig.tight_layout()
    fig.savefig(path, format=fmt, dpi=120)
    plt.close(fig)
    return Path(path)
