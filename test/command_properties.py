"""Safety properties of a recorded stream of motor-effort commands, shared by the fault tests.

The properties are the safety filter's contract (design notes, section 5), checked on what a
controller actually published rather than on the filter's own bookkeeping:

* every torque is finite;
* ``|tau| <= torque`` (the joint's torque limit, N m);
* between consecutive commands for one command name,
  ``|tau_k - tau_{k-1}| <= torque_rate * clamp(stamp_k - stamp_{k-1}, 0, 2 period) + 1e-9``.
  Stamps are made monotonic: a stamp older than the newest seen counts as no time passing. The
  clamp at two periods matches the controller's own dt clamp (joint_state_codec.TickClock), so a
  long gap does not license a large step; 1e-9 N m allows for floating-point rounding.
"""
from __future__ import annotations

import math
from dataclasses import dataclass
from typing import Iterable, Mapping

__all__ = ["Command", "check_commands"]


@dataclass(frozen=True)
class Command:
    """One published motor-effort message: header stamp (s) and torque per command name (N m)."""

    stamp: float
    efforts: Mapping[str, float]


def check_commands(messages: Iterable[Command], limits_by_command: dict, period: float) -> list[str]:
    """Violations of the command properties, in publication order (empty when all hold).

    Parameters
    ----------
    messages : iterable of Command
        Commands in the order they were published (received, for one reliable subscription).
    limits_by_command : dict
        Command name -> limits with ``torque`` (N m) and ``torque_rate`` (N m/s), e.g.
        ``safety.Limits``. Names not in it are reported as violations.
    period : float
        Control period (s); the slew allowance per step is at most two periods' worth.

    Returns
    -------
    list of str
        One readable line per violation, naming the message index, command and values.
    """
    newest = -math.inf
    last: dict[str, tuple[float, float]] = {}  # name -> (torque N m, monotonic stamp s)
    problems = []
    for k, msg in enumerate(messages):
        stamp = max(msg.stamp, newest)
        newest = stamp
        for name, tau in msg.efforts.items():
            where = f"message {k} (stamp {msg.stamp:.6f} s), {name}"
            limits = limits_by_command.get(name)
            if limits is None:
                problems.append(f"{where}: no limits for this command name")
                continue
            if not math.isfinite(tau):
                problems.append(f"{where}: torque {tau} is not finite")
                continue
            if abs(tau) > limits.torque:
                problems.append(f"{where}: |tau| = {abs(tau):.6g} N m above the limit {limits.torque:.6g} N m")
            if name in last:
                before, then = last[name]
                allowed = limits.torque_rate * min(max(stamp - then, 0.0), 2.0 * period) + 1e-9
                if abs(tau - before) > allowed:
                    problems.append(f"{where}: step {tau - before:+.6g} N m over {stamp - then:.6f} s, "
                                    f"allowed {allowed:.6g} N m at {limits.torque_rate:.6g} N m/s")
            last[name] = (tau, stamp)
    return problems
