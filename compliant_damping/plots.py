"""Plots of runs (recordings.Recording), written as PNG files with matplotlib's Agg backend."""
from __future__ import annotations

from pathlib import Path


def plot_run(rec, path, title: str | None = None) -> Path:
    """Link position, spring deflection and motor torque against time, one line per joint.

    rec: recordings.Recording; path: PNG file to write (its folder must exist). Returns the path.
    """
    import matplotlib
    matplotlib.use("Agg")
    import matplotlib.pyplot as plt

    fig, (ax_q, ax_phi, ax_tau) = plt.subplots(3, 1, sharex=True, figsize=(8, 7))
    for name, j in rec.joints.items():
        ax_q.plot(j.t, j.q, label=name)
        ax_phi.plot(j.t, j.theta - j.q, label=name)
        ax_tau.step(j.t_cmd, j.tau_m, where="post", label=name)
    ax_q.set_ylabel("link position q (rad)")
    ax_phi.set_ylabel("deflection theta - q (rad)")
    ax_tau.set_ylabel("motor torque (N m)")
    ax_tau.set_xlabel("time (s)")
    for ax in (ax_q, ax_phi, ax_tau):
        ax.grid(True, alpha=0.3)
    ax_q.legend(loc="best", fontsize="small")
    fig.suptitle(title or rec.source)
    fig.tight_layout()
    fig.savefig(path, dpi=100)
    plt.close(fig)
    return Path(path)
