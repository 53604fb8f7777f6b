"""Which parameter changes a running controller takes: the rule behind the controller node's
parameter callback, with no ROS here.

At run time ``law``, ``watchdog_timeout``, ``gain_ramp_time`` and each joint's ``gains.*`` and
``limits.*`` may change; ``lock_gains`` freezes the law and the gains; limits and the watchdog
timeout only tighten (raising one needs an unconfigured node). Everything else changes only
while the node is unconfigured.
"""
from __future__ import annotations

import re

from compliant_damping.control import safety
from compliant_damping.io.joint_state_codec import Rejection

__all__ = ["RUNTIME_KEYS", "runtime_refusal"]

RUNTIME_KEYS = re.compile(r"^(law|watchdog_timeout|gain_ramp_time|[^.]+\.(gains|limits)\.\w+)$")


def runtime_refusal(old, new, changed_keys) -> Rejection | None:
    """Why a running controller refuses to go from setup ``old`` to ``new`` (config.ControllerSetup,
    both valid) by changing ``changed_keys`` (dotted parameter names), or None when it may.

    The first reason found, in this order: a key fixed while configured, ``lock_gains``, a limit
    (or the watchdog timeout) raised.
    """
    fixed = sorted(k for k in changed_keys if not RUNTIME_KEYS.match(k))
    if fixed:
        return Rejection(f"{fixed[0]}: changes only while unconfigured (cleanup, set, configure)")
    if old.lock_gains and any(k == "law" or ".gains." in k for k in changed_keys):
        return Rejection("lock_gains is true: law and gains are fixed at run time")
    relaxed = [f"{j.name}.limits.{name}" for before, j in zip(old.joints, new.joints)
               for name in safety.relaxations(before.limits, j.limits)]
    if new.watchdog_timeout > old.watchdog_timeout:
        relaxed.append("watchdog_timeout")
    if relaxed:
        return Rejection(f"{relaxed[0]}: limits only tighten at run time; raising one needs an unconfigured node "
                         "(deactivate, cleanup, set, configure)")
    return None
