"""The run-time change rule of the controller (io/runtime_changes.py) on the bundled joint's setup.

Reference: the design notes' safety rules (section 5: limits only ever protect more at run time;
a rejected change keeps the old values and says why) and the node's documented run-time keys.
"""
import dataclasses

from compliant_damping.io import config
from compliant_damping.io.runtime_changes import runtime_refusal

OLD = config.load(config.bundled())[0]
KNEE = OLD.joints[0]


def _with(limits=None, gains=None, **top):
    joint = dataclasses.replace(KNEE, limits=limits or KNEE.limits, gains=gains or KNEE.gains)
    return dataclasses.replace(OLD, joints=(joint,), **top)


def test_tightened_limits_new_gains_and_a_law_switch_are_taken():
    new = _with(dataclasses.replace(KNEE.limits, torque=KNEE.limits.torque / 2),
                dataclasses.replace(KNEE.gains, link_damping=3.0), law="link_damping",
                watchdog_timeout=OLD.watchdog_timeout / 2)
    assert runtime_refusal(OLD, new, ["knee.limits.torque", "knee.gains.link_damping", "law", "watchdog_timeout"]) is None


def test_a_raised_limit_or_watchdog_is_refused_with_its_key():
    raised = _with(dataclasses.replace(KNEE.limits, deflection=KNEE.limits.deflection * 2))
    assert runtime_refusal(OLD, raised, ["knee.limits.deflection"]).reason.startswith(
        "knee.limits.deflection: limits only tighten at run time")
    slower = _with(watchdog_timeout=OLD.watchdog_timeout * 2)
    assert runtime_refusal(OLD, slower, ["watchdog_timeout"]).reason.startswith("watchdog_timeout: limits only tighten")


def test_fixed_keys_and_locked_gains_are_refused():
    assert "changes only while unconfigured" in runtime_refusal(OLD, OLD, ["control_rate"]).reason
    locked = dataclasses.replace(OLD, lock_gains=True)
    assert "lock_gains is true" in runtime_refusal(locked, _with(law="motor_pd", lock_gains=True), ["law"]).reason
    assert runtime_refusal(locked, locked, ["knee.limits.torque"]) is None
