"""One type for a run's time series: simulated (both simulators), recorded (CSV, rosbag2) or replayed over ROS.

States and commands keep their own time bases. A simulation samples the plant state at each
control tick and holds the command over the tick, so ``t_cmd`` is ``t``. A recording stamps the
two as they were published (a rosbag2 bag may hold states at 500 Hz and commands at 1 kHz), so
``t_cmd`` may differ from ``t`` in length and spacing. No ROS here.
"""
from __future__ import annotations

import dataclasses
from dataclasses import dataclass

import numpy as np

from compliant_damping.control.safety import Fault

__all__ = ["Run", "STATE_SERIES"]

STATE_SERIES = ("q", "dq", "theta", "dtheta", "tau_s")


@dataclass(frozen=True, eq=False)
class Run:
    """Time series of one run of a robot's joints; 2-D arrays are joint-major columns, shape (samples, joints).

    Attributes
    ----------
    source : str
        Where the run comes from: ``"simulation"``, a file name, ``"ros"``.
    joint_names : tuple of str
        One per column of the arrays.
    t : ndarray, shape (ticks,)
        Times of the state samples (s), from the start of the run.
    q, dq : ndarray, shape (ticks, joints)
        Link position (rad) and velocity (rad/s) at ``t``.
    theta, dtheta : ndarray, shape (ticks, joints)
        Motor position (rad) and velocity (rad/s) at ``t``, link side of the gear.
    tau_s : ndarray, shape (ticks, joints)
        Spring torque (N m) at ``t``; NaN where a recording has none.
    t_cmd : ndarray, shape (commands,)
        Times of the motor torque commands (s), on the clock of ``t``; each holds until the next.
    tau_m : ndarray, shape (commands, joints)
        Motor torque commands after the safety filter (N m).
    faults : tuple of (safety.Fault or None)
        Per joint, the first fault its controller reported during the run; None where none was
        reported (a recording carries no faults).
    control_dt : float or None
        Control period (s); None when the source does not say.
    wall_time : float or None
        Wall-clock time spent producing the run (s); None for recordings.

    The dataclass is frozen (fields cannot be rebound); the arrays themselves are not copied. Runs compare by
    identity (``==`` on arrays has no single truth value): compare their arrays or their metrics.
    """

    source: str
    joint_names: tuple
    t: np.ndarray
    q: np.ndarray
    dq: np.ndarray
    theta: np.ndarray
    dtheta: np.ndarray
    tau_s: np.ndarray
    t_cmd: np.ndarray
    tau_m: np.ndarray
    faults: tuple
    control_dt: float | None = None
    wall_time: float | None = None

    def __post_init__(self):
        n, ticks, commands = len(self.joint_names), len(self.t), len(self.t_cmd)
        shapes = {k: np.shape(getattr(self, k)) for k in STATE_SERIES}
        shapes["tau_m"] = np.shape(self.tau_m)
        wanted = {k: (ticks, n) for k in STATE_SERIES} | {"tau_m": (commands, n)}
        wrong = {k: s for k, s in shapes.items() if s != wanted[k]}
        if wrong or np.ndim(self.t) != 1 or np.ndim(self.t_cmd) != 1 or len(self.faults) != n:
            raise ValueError(f"run {self.source}: {n} joint(s), {ticks} state and {commands} command sample(s) "
                             f"need shapes {wanted} and {n} fault entries; got {shapes}, t {np.shape(self.t)}, "
                             f"t_cmd {np.shape(self.t_cmd)}, {len(self.faults)} fault entries")
        if not all(f is None or isinstance(f, Fault) for f in self.faults):
            raise TypeError(f"run {self.source}: faults must be safety.Fault or None, got {self.faults!r}")

    @classmethod
    def simulated(cls, joint_names, control_dt: float, states: np.ndarray, tau_m: np.ndarray, tau_s: np.ndarray,
                  faults, wall_time: float) -> Run:
        """A simulated run: states ``[q, q', theta, theta']`` of shape (ticks, joints, 4) sampled at the control
        ticks ``k control_dt``, commands ``tau_m`` (ticks, joints) held over each tick from the same instants."""
        t = np.arange(len(states)) * control_dt
        q, dq, theta, dtheta = (np.ascontiguousarray(states[:, :, c]) for c in range(4))
        return cls("simulation", tuple(joint_names), t, q, dq, theta, dtheta, tau_s, t, tau_m, tuple(faults),
                   control_dt, wall_time)

    def window(self, start: float = -np.inf, end: float = np.inf, joints=None) -> Run:
        """The part of the run with state and command times in [start, end] (s), of ``joints`` (names; default
        all), e.g. to plot or compare one joint around an event."""
        names = self.joint_names if joints is None else tuple(joints)
        cols = [self.joint_names.index(n) for n in names]
        rows = (self.t >= start) & (self.t <= end)
        cmd_rows = (self.t_cmd >= start) & (self.t_cmd <= end)
        states = {k: getattr(self, k)[rows][:, cols] for k in STATE_SERIES}
        return dataclasses.replace(self, joint_names=names, t=self.t[rows], t_cmd=self.t_cmd[cmd_rows],
                                   tau_m=self.tau_m[cmd_rows][:, cols], faults=tuple(self.faults[c] for c in cols),
                                   **states)
