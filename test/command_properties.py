"""The safety properties every published motor command must have (design notes, section 5).

For each command name, over the published sequence: finite; |tau| <= the joint's torque limit;
and between consecutive commands |tau_k - tau_(k-1)| <= torque_rate * clamp(T_k - T_(k-1), 0,
2 * period) with T the running maximum of the stamps (a stamp older than the newest seen counts
as no time passing; a command after a gap may use at most two periods of slew).
"""
import math


def _seconds(stamp) -> float:
    return stamp.sec + stamp.nanosec * 1e-9


def check_commands(messages, limits_by_command: dict, period: float) -> list:
    """Violations (readable strings) of the command properties in ``messages`` (sensor_msgs/JointState)."""
    problems, last = [], {}
    for i, msg in enumerate(messages):
        t = _seconds(msg.header.stamp)
        for name, tau in zip(msg.name, msg.effort):
            lim = limits_by_command.get(name)
            if lim is None:
                continue
            if not math.isfinite(tau) or abs(tau) > lim.torque:
                problems.append(f"message {i} {name}: {tau} N m not finite or beyond {lim.torque} N m")
                continue
            if name in last:
                newest, previous = last[name]
                window = min(max(t - newest, 0.0), 2.0 * period)
                if abs(tau - previous) > lim.torque_rate * window + 1e-9:
                    problems.append(f"message {i} {name}: {previous} -> {tau} N m over {window * 1e3:.3f} ms of stamp "
                                    f"time, beyond {lim.torque_rate} N m/s")
                newest = max(newest, t)
            else:
                newest = t
            last[name] = (newest, tau)
    return problems
