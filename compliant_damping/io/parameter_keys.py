"""The parameter keys of both nodes: every key's ROS type, default and description, and the
refusal of a key neither node knows (with the closest known key). Validation is io/config.py's;
the ROS parameter declarations (nodes/params.py) and ``cdamp keys`` list :func:`parameter_specs`.

Keys are ROS parameter names, dotted when nested. The top-level settings of a node are
:class:`Setting` rows; each joint has its own settings (``<joint>.<key>``) and the fields of
its parameter dataclasses (``<joint>.<prefix><field>``, prefix per group). With a URDF (the
robot section, io/robot_section.py) the per-joint groups are the drive's only: the URDF gives the
links.
"""
from __future__ import annotations

import difflib
from dataclasses import MISSING, dataclass, fields

from compliant_damping.control.laws import LAW_NAMES, Gains, NominalDrive, NominalModel
from compliant_damping.control.safety import SAFE_MODES, Limits
from compliant_damping.dynamics.bench_plant import LINK_KEYS, DriveParams, JointParams
from compliant_damping.io.parameter_files import ConfigError
from compliant_damping.sim.sensors import SensorParams

__all__ = ["CONTROLLER_NODE", "SIM_NODE", "Setting", "CONTROLLER_SETTINGS", "CONTROLLER_JOINT_SETTINGS",
           "CONTROLLER_JOINT_GROUPS", "CONTROLLER_URDF_JOINT_GROUPS", "SIM_SETTINGS", "SIM_JOINT_SETTINGS",
           "SIM_JOINT_GROUPS", "SIM_URDF_JOINT_GROUPS", "dataclass_keys", "ParamSpec", "parameter_specs",
           "unknown_key", "unknown_key_errors"]

CONTROLLER_NODE = "damping_controller"
SIM_NODE = "simulated_joint"


@dataclass(frozen=True)
class Setting:
    """A non-dataclass parameter: key (per joint: after "<joint>."), ROS type, default, doc.

    ``default`` is MISSING for a required key, or a callable of the joint name for per-joint defaults.
    ``check`` names one of config's value checks.
    """

    key: str
    kind: type
    default: object
    doc: str
    choices: tuple = ()
    check: str | None = None


CONTROLLER_SETTINGS = (
    Setting("joint_names", list, MISSING, "joints this controller drives, in command order"),
    Setting("law", str, MISSING, "control law", LAW_NAMES),
    Setting("safe_mode", str, "zero_torque", "what a fault commands", SAFE_MODES),
    Setting("control_rate", float, 1000.0, "Hz, expected joint-state rate (offline: control tick)", check="positive"),
    Setting("watchdog_timeout", float, 0.05, "s without a joint state before safe mode", check="positive"),
    Setting("gain_ramp_time", float, 0.5, "s over which accepted gain changes blend in", check="nonnegative"),
    Setting("lock_gains", bool, False, "refuse gain and law changes at run time"),
    Setting("spring_torque_source", str, "deflection", "spring torque from the deflection or the effort field",
            ("deflection", "effort")),
    Setting("array_output", bool, False, "also publish an ordered Float64MultiArray of efforts"),
    Setting("nominal_urdf", str, "", "controller's URDF file: path or package://PACKAGE/PATH "
            "('' with no robot_description: built-in pendulum joints from <joint>.model)"),
    Setting("robot_description", str, "", "controller's URDF as a string, the ROS convention (or nominal_urdf)"),
)
CONTROLLER_JOINT_SETTINGS = (
    Setting("link_state", str, lambda n: n, "JointState entry with the link position and velocity"),
    Setting("motor_state", str, lambda n: f"{n}_motor", "JointState entry with the motor position and velocity"),
    Setting("command", str, lambda n: f"{n}_motor", "name of this joint's effort command"),
)
CONTROLLER_JOINT_GROUPS = (("model.", NominalModel), ("gains.", Gains), ("limits.", Limits))
# With a URDF the URDF gives the links: the per-joint groups are the drive's only.
CONTROLLER_URDF_JOINT_GROUPS = (("model.", NominalDrive), ("gains.", Gains), ("limits.", Limits))

SIM_SETTINGS = (
    Setting("joint_names", list, MISSING, "simulated joints"),
    Setting("state_rate", float, 1000.0, "Hz, joint-state publication", check="positive"),
    Setting("substeps", int, 10, "plant RK4 steps per state period"),
    Setting("command_timeout", float, 0.05, "s; older effort commands are replaced by zero", check="positive"),
    Setting("lock_step", bool, False, "advance one period per command and publish /clock"),
    Setting("hold_until_commanded", bool, True, "real time: the robot rests at its start state, as on a stand, "
            "until the first motor_effort command (false: it runs, and may fall, from the start)"),
    Setting("seed", int, 0, "seed of the sensor noise"),
    Setting("robot_urdf", str, "", "simulated robot's URDF file: path or package://PACKAGE/PATH "
            "('' with no robot_description: built-in pendulum joints)"),
    Setting("robot_description", str, "", "simulated robot's URDF as a string (or robot_urdf)"),
    Setting("contact.frame", str, "", "URDF frame that touches the floor plane z = contact.height ('': no floor)"),
    Setting("contact.height", float, 0.0, "m, height of the floor plane in the URDF world", check="finite"),
    Setting("contact.stiffness", float, 1.0e5, "N/m, floor contact stiffness", check="positive"),
    Setting("contact.damping", float, 500.0, "N s/m, floor contact damping (push only)", check="nonnegative"),
    Setting("contact.rise_speed", float, 0.0, "m/s, floor speed along its normal while it rises (a drop test rig)",
            check="finite"),
    Setting("contact.rise_start", float, 0.0, "s of plant time when the floor starts to rise", check="nonnegative"),
    Setting("contact.rise_time", float, 0.0, "s the floor rises for, then rests (0: it stays at contact.height)",
            check="nonnegative"),
)
SIM_JOINT_SETTINGS = (
    Setting("initial_position", float, 0.0, "rad, link at rest there, spring holding gravity", check="finite"),
)
SIM_JOINT_GROUPS = (("", JointParams), ("", SensorParams))
SIM_URDF_JOINT_GROUPS = (("", DriveParams), ("", SensorParams))


def dataclass_keys(cls, prefix: str):
    """(dotted key, field) for every field of a parameter dataclass."""
    return [(f"{prefix}{f.name}", f) for f in fields(cls)]


@dataclass(frozen=True)
class ParamSpec:
    """One ROS parameter of a node: dotted key, ROS type, default (MISSING: required) and description."""

    key: str
    kind: type
    default: object
    description: str


def _joint_groups(node: str, robot: bool):
    if node == CONTROLLER_NODE:
        return CONTROLLER_URDF_JOINT_GROUPS if robot else CONTROLLER_JOINT_GROUPS
    return SIM_URDF_JOINT_GROUPS if robot else SIM_JOINT_GROUPS


def parameter_specs(node: str, joint_names, robot: bool = False) -> list:
    """Every parameter of ``node`` (CONTROLLER_NODE or SIM_NODE) for the given joints.

    ``robot``: the section names a URDF (robot_section.describes_robot), so the per-joint keys
    are the drive's only; otherwise they include the built-in pendulum link's.
    """
    settings, joint_settings = ((CONTROLLER_SETTINGS, CONTROLLER_JOINT_SETTINGS) if node == CONTROLLER_NODE
                                else (SIM_SETTINGS, SIM_JOINT_SETTINGS))
    groups = _joint_groups(node, robot)
    specs = [ParamSpec(s.key, s.kind, s.default, s.doc) for s in settings]
    for n in joint_names:
        specs += [ParamSpec(f"{n}.{s.key}", s.kind, s.default(n) if callable(s.default) else s.default, s.doc)
                  for s in joint_settings]
        for prefix, cls in groups:
            specs += [ParamSpec(key, float, MISSING if f.metadata.get("required") else f.default,
                                f"{f.metadata['doc']} [{f.metadata['unit']}]")
                      for key, f in dataclass_keys(cls, f"{n}.{prefix}")]
    return specs


def unknown_key(key: str, node: str, joint_names, robot: bool = False) -> ConfigError:
    """Refusal of ``key``, unknown to ``node`` with these joints, naming the closest known key.

    The candidates are the known keys of that joint when ``key`` starts with a joint name,
    else every known key of the node (difflib's similarity ratio, cut-off 0.6). ``robot``: the
    node section names a URDF, which gives the link parameters (model.LINK_KEYS).
    """
    head = key.split(".", 1)[0]
    if robot and head in joint_names and key.rsplit(".", 1)[-1] in LINK_KEYS:
        return ConfigError(key, f"the URDF gives the links of {node}; remove the built-in joint's link parameter")
    known = [s.key for s in parameter_specs(node, joint_names, robot)]
    pool = [k for k in known if k.startswith(f"{head}.")] if head in joint_names else known
    close = difflib.get_close_matches(key, pool, n=1)
    hint = f"; did you mean {close[0]}?" if close else ""
    return ConfigError(key, f"unknown key in {node}{hint} (`cdamp keys` lists the known keys)")


def unknown_key_errors(params: dict, node: str, joint_names, robot: bool = False) -> list:
    """:func:`unknown_key` of every key of the flat ``params`` that ``node`` does not know, sorted."""
    known = {s.key for s in parameter_specs(node, joint_names, robot)}
    return [unknown_key(k, node, joint_names, robot) for k in sorted(set(params) - known)]
