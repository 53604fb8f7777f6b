"""Parameter files: one ROS 2 parameter YAML for the controller node, the simulated
joint node and the command-line tool.

Layout (node names are the sections; keys are ROS parameter names, dotted when nested)::

    damping_controller:
      ros__parameters:
        joint_names: [knee]
        law: decoupled_damper
        knee:
          model:  {link_inertia: 0.25, ...}     # laws.NominalModel
          gains:  {link_damping: 4.0, ...}      # laws.Gains
          limits: {torque: 40.0, ...}           # safety.Limits
    simulated_joint:
      ros__parameters:
        joint_names: [knee]
        knee: {link_inertia: 0.25, ...}         # model.JointParams + sensors.SensorParams

Values are typed as ROS types them: a float key needs a float (``300.0``, not
``300``). Every error names the dotted key and the reason (:class:`ConfigError`).
Runtime parameter changes in the nodes go through the same functions.
"""
from __future__ import annotations

import math
from dataclasses import MISSING, dataclass, fields
from pathlib import Path

import yaml

from .laws import LAW_NAMES, Gains, NominalModel, check_gains
from .model import JointParams
from .safety import SAFE_MODES, Limits
from .sensors import SensorParams

CONTROLLER_NODE = "damping_controller"
SIM_NODE = "simulated_joint"


class ConfigError(ValueError):
    """A parameter is missing, unknown, of the wrong type or physically impossible."""

    def __init__(self, key: str, reason: str):
        super().__init__(f"{key}: {reason}")
        self.key = key
        self.reason = reason


_CHECKS = {
    "positive": (lambda v: math.isfinite(v) and v > 0.0, "must be a finite value above zero"),
    "nonnegative": (lambda v: math.isfinite(v) and v >= 0.0, "must be finite and not negative"),
    "finite": (math.isfinite, "must be finite"),
    "not_nan": (lambda v: not math.isnan(v), "must not be NaN"),
    "limit": (lambda v: v > 0.0, "must be above zero (.inf disables it)"),
}


def _typed(key: str, value, kind):
    """``value`` checked against the ROS type ``kind`` (float, int, bool, str, list of str)."""
    if kind is float:
        if isinstance(value, bool) or not isinstance(value, float):
            hint = f" (write {float(value)!r}: ROS parameter files are typed)" if isinstance(value, int) and not isinstance(value, bool) else ""
            raise ConfigError(key, f"expected a float, got {value!r}{hint}")
    elif kind is int:
        if isinstance(value, bool) or not isinstance(value, int):
            raise ConfigError(key, f"expected an integer, got {value!r}")
    elif kind is bool:
        if not isinstance(value, bool):
            raise ConfigError(key, f"expected true or false, got {value!r}")
    elif kind is str:
        if not isinstance(value, str) or not value:
            raise ConfigError(key, f"expected a non-empty string, got {value!r}")
    elif kind is list:
        if not isinstance(value, list) or not value or not all(isinstance(v, str) and v for v in value):
            raise ConfigError(key, f"expected a non-empty list of names, got {value!r}")
        if len(set(value)) != len(value):
            raise ConfigError(key, f"names must be unique, got {value!r}")
    return value


def dataclass_keys(cls, prefix: str):
    """(dotted key, field) for every field of a parameter dataclass."""
    return [(f"{prefix}{f.name}", f) for f in fields(cls)]


def build(cls, params: dict, prefix: str, used: set):
    """Instance of parameter dataclass ``cls`` from the flat ``params`` under ``prefix``."""
    values = {}
    for key, f in dataclass_keys(cls, prefix):
        if key not in params:
            if f.default is MISSING:
                raise ConfigError(key, f"required ({f.metadata['doc']}, {f.metadata['unit']})")
            continue
        used.add(key)
        value = _typed(key, params[key], float)
        ok, reason = _CHECKS[f.metadata["check"]]
        if not ok(value):
            raise ConfigError(key, f"{reason}, got {value!r} ({f.metadata['doc']})")
        values[f.name] = value
    try:
        return cls(**values)
    except ValueError as err:  # cross-field checks say "field: reason"
        field_name, _, reason = str(err).partition(": ")
        raise ConfigError(f"{prefix}{field_name}", reason) from None


def _setting(params: dict, key: str, kind, default, used: set, choices=None, check=None):
    used.add(key)
    value = _typed(key, params[key], kind) if key in params else default
    if value is MISSING:
        raise ConfigError(key, "required")
    if choices is not None and value not in choices:
        raise ConfigError(key, f"must be one of {', '.join(choices)}, got {value!r}")
    if check is not None:
        ok, reason = _CHECKS[check]
        if not ok(value):
            raise ConfigError(key, f"{reason}, got {value!r}")
    return value


def _reject_unknown(params: dict, used: set, section: str):
    unknown = sorted(set(params) - used)
    if unknown:
        raise ConfigError(unknown[0], f"unknown key in {section} (known keys are listed in DEVELOPERS.md)")


@dataclass(frozen=True)
class ControllerJoint:
    """Everything the controller needs for one joint."""

    name: str
    link_state: str      # JointState entry with the link position/velocity (and spring torque as effort)
    motor_state: str     # JointState entry with the motor position/velocity
    command: str         # name of the effort command for this joint's motor
    model: NominalModel
    gains: Gains
    limits: Limits


@dataclass(frozen=True)
class ControllerSetup:
    joints: tuple
    law: str
    safe_mode: str
    control_rate: float       # Hz: expected joint-state rate, offline control tick
    watchdog_timeout: float   # s
    gain_ramp_time: float     # s
    lock_gains: bool
    spring_torque_source: str  # "deflection" or "effort"
    array_output: bool

    @property
    def joint_names(self):
        return [j.name for j in self.joints]


def controller_setup(params: dict) -> ControllerSetup:
    """Validated controller setup from flat (dotted) parameters."""
    used: set = set()
    names = _setting(params, "joint_names", list, MISSING, used)
    law = _setting(params, "law", str, MISSING, used, choices=LAW_NAMES)
    joints = []
    for n in names:
        gains = build(Gains, params, f"{n}.gains.", used)
        try:
            check_gains(law, gains)
        except ValueError as err:  # "field: reason"
            field_name, _, reason = str(err).partition(": ")
            raise ConfigError(f"{n}.gains.{field_name}", reason) from None
        joints.append(ControllerJoint(
            name=n,
            link_state=_setting(params, f"{n}.link_state", str, n, used),
            motor_state=_setting(params, f"{n}.motor_state", str, f"{n}_motor", used),
            command=_setting(params, f"{n}.command", str, f"{n}_motor", used),
            model=build(NominalModel, params, f"{n}.model.", used),
            gains=gains,
            limits=build(Limits, params, f"{n}.limits.", used)))
    setup = ControllerSetup(
        joints=tuple(joints), law=law,
        safe_mode=_setting(params, "safe_mode", str, "zero_torque", used, choices=SAFE_MODES),
        control_rate=_setting(params, "control_rate", float, 1000.0, used, check="positive"),
        watchdog_timeout=_setting(params, "watchdog_timeout", float, 0.05, used, check="positive"),
        gain_ramp_time=_setting(params, "gain_ramp_time", float, 0.5, used, check="nonnegative"),
        lock_gains=_setting(params, "lock_gains", bool, False, used),
        spring_torque_source=_setting(params, "spring_torque_source", str, "deflection", used,
                                      choices=("deflection", "effort")),
        array_output=_setting(params, "array_output", bool, False, used))
    _reject_unknown(params, used, CONTROLLER_NODE)
    return setup


@dataclass(frozen=True)
class SimJoint:
    name: str
    plant: JointParams
    sensor: SensorParams
    initial_position: float  # rad, link at rest there with the spring holding gravity


@dataclass(frozen=True)
class SimSetup:
    joints: tuple
    state_rate: float        # Hz: joint-state publication and control rate
    substeps: int            # plant integration steps per state period
    command_timeout: float   # s: older commands are replaced by zero torque
    lock_step: bool          # advance one period per command and publish /clock
    seed: int                # noise seed

    @property
    def joint_names(self):
        return [j.name for j in self.joints]


def sim_setup(params: dict) -> SimSetup:
    """Validated simulated-joint setup from flat (dotted) parameters."""
    used: set = set()
    names = _setting(params, "joint_names", list, MISSING, used)
    joints = []
    for n in names:
        plant = build(JointParams, params, f"{n}.", used)
        q0 = _setting(params, f"{n}.initial_position", float, 0.0, used, check="finite")
        if not plant.stop_lower <= q0 <= plant.stop_upper:
            raise ConfigError(f"{n}.initial_position", f"{q0} rad is outside the end stops")
        joints.append(SimJoint(n, plant, build(SensorParams, params, f"{n}.", used), q0))
    setup = SimSetup(
        joints=tuple(joints),
        state_rate=_setting(params, "state_rate", float, 1000.0, used, check="positive"),
        substeps=_setting(params, "substeps", int, 10, used),
        command_timeout=_setting(params, "command_timeout", float, 0.05, used, check="positive"),
        lock_step=_setting(params, "lock_step", bool, False, used),
        seed=_setting(params, "seed", int, 0, used))
    if setup.substeps < 1:
        raise ConfigError("substeps", f"must be at least 1, got {setup.substeps}")
    _reject_unknown(params, used, SIM_NODE)
    return setup


def flatten(tree: dict, prefix: str = "") -> dict:
    """Nested YAML mapping to ROS's dotted parameter names."""
    flat = {}
    for key, value in tree.items():
        if isinstance(value, dict):
            flat.update(flatten(value, f"{prefix}{key}."))
        else:
            flat[f"{prefix}{key}"] = value
    return flat


def node_parameters(document: dict, node: str) -> dict:
    """Flat parameters for ``node`` from a parsed parameter file (``/**`` and namespaced sections merge)."""
    if not isinstance(document, dict):
        raise ConfigError("<file>", "a parameter file is a mapping of node names to ros__parameters")
    flat = {}
    for section, body in document.items():
        if section == "/**" or str(section).rstrip("/").split("/")[-1] == node:
            if not isinstance(body, dict) or not isinstance(body.get("ros__parameters"), dict):
                raise ConfigError(str(section), "expected a 'ros__parameters' mapping")
            flat.update(flatten(body["ros__parameters"]))
    if not flat:
        raise ConfigError(node, "no section for this node in the parameter file")
    return flat


def read(path) -> dict:
    """Parsed parameter file; a YAML syntax error becomes a ConfigError naming the line."""
    try:
        return yaml.safe_load(Path(path).read_text()) or {}
    except yaml.YAMLError as err:
        raise ConfigError(str(path), f"not valid YAML: {err}") from None


def load(path):
    """(ControllerSetup, SimSetup) from one parameter file."""
    doc = read(path)
    return controller_setup(node_parameters(doc, CONTROLLER_NODE)), sim_setup(node_parameters(doc, SIM_NODE))


def share_dir() -> Path:
    """Folder holding config/ and launch/: the source tree, or the install's share/compliant_damping."""
    here = Path(__file__).resolve().parent.parent
    if (here / "config").is_dir():
        return here
    try:
        from ament_index_python.packages import get_package_share_directory
        return Path(get_package_share_directory("compliant_damping"))
    except Exception:  # noqa: BLE001 - no ament index: fall back to the Python prefix
        import sys
        return Path(sys.prefix) / "share" / "compliant_damping"


def bundled(name: str = "one_joint.yaml") -> Path:
    """Path of a bundled parameter file in config/."""
    return share_dir() / "config" / name
