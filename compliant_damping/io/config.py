"""Parameter validation: one ROS 2 parameter YAML for the controller node, the simulated
joint node and the command-line tool (reading, sections and layering: io/parameter_files.py, whose
names this module passes on; the keys of each node, their types and defaults: io/parameter_keys.py).

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
``300``). Every error names the dotted key and the reason (:class:`ConfigError`); an unknown
key names the closest known key of its node section (of its joint, for a per-joint key).
Runtime parameter changes in the nodes go through the same functions.

Rules beyond one key (each refuses the setup):

* ``watchdog_timeout`` at least two control periods (``2 / control_rate``): the watchdog is
  restarted by every joint state, so a shorter timeout trips between two regular states.
* ``<joint>.limits.torque / torque_rate`` at most ``safety.MAX_RAMP_DOWN`` (10 s, checked by
  ``safety.Limits``): the safe state ramps the command to zero at the slew limit, and the node
  promises to be there within 10 s.

:func:`controller_check` and :func:`sim_check` gather every problem instead of stopping at the
first (``cdamp check-config``, with the limit consistency rules of io/config_check.py).
"""
from __future__ import annotations

import math
from dataclasses import MISSING, dataclass, field

from compliant_damping.control.laws import Gains, NominalDrive, NominalModel, check_gains
from compliant_damping.control.safety import Limits
from compliant_damping.dynamics.bench_plant import DriveParams, JointParams
from compliant_damping.dynamics.elastic_chain import PlaneContact
from compliant_damping.io.parameter_files import (ConfigError, YamlSyntaxError, bundled, flatten, layered_parameters,
                                                  node_parameters, read, share_dir)
from compliant_damping.io.parameter_keys import (CONTROLLER_JOINT_SETTINGS, CONTROLLER_NODE, CONTROLLER_SETTINGS,
                                                 SIM_JOINT_SETTINGS, SIM_NODE, SIM_SETTINGS, Setting, dataclass_keys,
                                                 unknown_key_errors)
from compliant_damping.io.robot_section import (URDF_ARGUMENT, URDF_KEYS, build_links, describes_robot, robot_source,
                                                with_urdf_file)
from compliant_damping.sim.sensors import SensorParams

__all__ = ["CONTROLLER_NODE", "SIM_NODE", "PACED_EFFORT", "ConfigError", "YamlSyntaxError", "Problems", "Checked",
           "build", "ControllerJoint", "ControllerSetup", "controller_check", "controller_setup", "SimJoint",
           "SimSetup", "sim_check", "sim_setup", "load", "load_controller", "contact_parameters", "launch_parameters",
           # the node names are parameter_keys'; reading, sections and layering parameter_files';
           # callers find them here too
           "bundled", "flatten", "layered_parameters", "node_parameters", "read", "share_dir"]

# Input of a lock-step simulated joint paced by the scenario player (nodes/scenario_player.py):
# start the joint with ``-r motor_effort:=<PACED_EFFORT>`` and the player relays the commands.
PACED_EFFORT = "paced_motor_effort"


class Problems:
    """ConfigErrors gathered instead of raised at the first one."""

    def __init__(self):
        self.found: list = []

    def attempt(self, fn, *args):
        """``fn(*args)``, or None after recording the ConfigError it raised."""
        try:
            return fn(*args)
        except ConfigError as err:
            self.found.append(err)
            return None


@dataclass(frozen=True)
class Checked:
    """Outcome of checking one node section: the setup (None if any problem) and every problem."""

    setup: object
    problems: tuple


_CHECKS = {
    "positive": (lambda v: math.isfinite(v) and v > 0.0, "must be a finite value above zero"),
    "nonnegative": (lambda v: math.isfinite(v) and v >= 0.0, "must be finite and not negative"),
    "finite": (math.isfinite, "must be finite"),
    "not_nan": (lambda v: not math.isnan(v), "must not be NaN"),
    "limit": (lambda v: v > 0.0, "must be above zero (.inf disables it)"),
}


def _typed(key: str, value, kind, empty_ok: bool = False):
    """``value`` checked against the ROS type ``kind`` (float, int, bool, str, list of str).

    ``empty_ok``: an empty string is allowed (a string setting whose default "" means none).
    """
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
        if not isinstance(value, str) or not (value or empty_ok):
            raise ConfigError(key, f"expected a non-empty string, got {value!r}")
    elif kind is list:
        if not isinstance(value, list) or not value or not all(isinstance(v, str) and v for v in value):
            raise ConfigError(key, f"expected a non-empty list of names, got {value!r}")
        if len(set(value)) != len(value):
            raise ConfigError(key, f"names must be unique, got {value!r}")
    return value


def _field(params: dict, key: str, f):
    """Checked float value of dataclass field ``f`` under ``key``, or MISSING when absent and optional."""
    if key not in params:
        if f.default is MISSING or f.metadata.get("required"):
            raise ConfigError(key, f"required ({f.metadata['doc']}, {f.metadata['unit']})")
        return MISSING
    value = _typed(key, params[key], float)
    ok, reason = _CHECKS[f.metadata["check"]]
    if not ok(value):
        raise ConfigError(key, f"{reason}, got {value!r} ({f.metadata['doc']})")
    return value


def build(cls, params: dict, prefix: str, problems: Problems):
    """Instance of parameter dataclass ``cls`` from the flat ``params`` under ``prefix``.

    None after recording every bad key in ``problems``; the cross-field checks of ``cls``
    run only when each field is valid.
    """
    before = len(problems.found)
    values = {f.name: problems.attempt(_field, params, key, f) for key, f in dataclass_keys(cls, prefix)}
    if len(problems.found) > before:
        return None
    try:
        return cls(**{name: v for name, v in values.items() if v is not MISSING})
    except ValueError as err:  # cross-field checks say "field: reason"
        field_name, _, reason = str(err).partition(": ")
        problems.found.append(ConfigError(f"{prefix}{field_name}", reason))
        return None


def _setting(params: dict, setting: Setting, joint: str | None = None):
    key = setting.key if joint is None else f"{joint}.{setting.key}"
    default = setting.default(joint) if callable(setting.default) else setting.default
    value = _typed(key, params[key], setting.kind, default == "") if key in params else default
    if value is MISSING:
        raise ConfigError(key, f"required ({setting.doc})")
    if setting.choices and value not in setting.choices:
        raise ConfigError(key, f"must be one of {', '.join(setting.choices)}, got {value!r}")
    if setting.check is not None:
        ok, reason = _CHECKS[setting.check]
        if not ok(value):
            raise ConfigError(key, f"{reason}, got {value!r}")
    return value


def _settings(params: dict, table, problems: Problems, joint: str | None = None) -> dict:
    """{key: value} of the settings in ``table``; a bad one is recorded and left out."""
    values = {s.key: problems.attempt(_setting, params, s, joint) for s in table}
    return {k: v for k, v in values.items() if v is not None}


@dataclass(frozen=True)
class ControllerJoint:
    """Everything the controller needs for one joint."""

    name: str
    link_state: str      # JointState entry with the link position/velocity (and spring torque as effort)
    motor_state: str     # JointState entry with the motor position/velocity
    command: str         # name of the effort command for this joint's motor
    model: NominalDrive  # a NominalModel (drive and pendulum link) for the built-in joints
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
    links: object = field(compare=False)  # link dynamics of the nominal model (built from the rest)
    urdf_source: str | None   # where its URDF came from; None for the built-in joints

    @property
    def joint_names(self):
        return [j.name for j in self.joints]


def _controller_joint(params: dict, name: str, law: str | None, robot: bool,
                      problems: Problems) -> ControllerJoint | None:
    before = len(problems.found)
    gains = build(Gains, params, f"{name}.gains.", problems)
    if gains is not None and law is not None:
        try:
            check_gains(law, gains)
        except ValueError as err:  # "field: reason"
            field_name, _, reason = str(err).partition(": ")
            problems.found.append(ConfigError(f"{name}.gains.{field_name}", reason))
    names = _settings(params, CONTROLLER_JOINT_SETTINGS, problems, name)
    model = build(NominalDrive if robot else NominalModel, params, f"{name}.model.", problems)
    limits = build(Limits, params, f"{name}.limits.", problems)
    if len(problems.found) > before:
        return None
    return ControllerJoint(name=name, **names, model=model, gains=gains, limits=limits)


def controller_check(params: dict) -> Checked:
    """Every problem of the controller's flat (dotted) parameters, and the setup if there is none."""
    problems = Problems()
    top = _settings(params, CONTROLLER_SETTINGS, problems)
    if "watchdog_timeout" in top and "control_rate" in top and top["watchdog_timeout"] < 2.0 / top["control_rate"]:
        problems.found.append(ConfigError(
            "watchdog_timeout", f"{top['watchdog_timeout']} s is below two control periods "
            f"(2 / control_rate = {2.0 / top['control_rate']:.6g} s): it would trip between regular joint states"))
    names = top.pop("joint_names", None)
    if names is None:  # without the joints, per-joint keys cannot be told from unknown ones
        return Checked(None, tuple(problems.found))
    robot = describes_robot(params, CONTROLLER_NODE)
    joints = [_controller_joint(params, n, top.get("law"), robot, problems) for n in names]
    problems.found += unknown_key_errors(params, CONTROLLER_NODE, names, robot)
    source = problems.attempt(robot_source, params, CONTROLLER_NODE)
    links = None if problems.found else problems.attempt(build_links, source, names, [j.model for j in joints])
    setup = None if problems.found else ControllerSetup(joints=tuple(joints), links=links,
                                                        urdf_source=source and source.origin,
                                                        **_plain(top, CONTROLLER_NODE))
    return Checked(setup, tuple(problems.found))


def _setup(checked: Checked):
    """The setup of ``checked``; raises its first problem (a ConfigError) if it has any."""
    if checked.problems:
        raise checked.problems[0]
    return checked.setup


def controller_setup(params: dict) -> ControllerSetup:
    """Validated controller setup from flat (dotted) parameters; raises the first ConfigError."""
    return _setup(controller_check(params))


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
    hold_until_commanded: bool  # real time: rest at the start state until the first command
    seed: int                # noise seed
    links: object = field(compare=False)  # link dynamics of the simulated robot (built from the rest)
    urdf_source: str | None  # where its URDF came from; None for the built-in joints
    contact: PlaneContact | None  # the floor under a URDF frame, if any

    @property
    def joint_names(self):
        return [j.name for j in self.joints]


def _sim_joint(params: dict, name: str, robot: bool, problems: Problems) -> SimJoint | None:
    before = len(problems.found)
    plant = build(DriveParams if robot else JointParams, params, f"{name}.", problems)
    q0 = _settings(params, SIM_JOINT_SETTINGS, problems, name).get("initial_position")
    if plant is not None and q0 is not None and not plant.stop_lower <= q0 <= plant.stop_upper:
        problems.found.append(ConfigError(f"{name}.initial_position", f"{q0} rad is outside the end stops"))
    sensor = build(SensorParams, params, f"{name}.", problems)
    return None if len(problems.found) > before else SimJoint(name, plant, sensor, q0)


def sim_check(params: dict) -> Checked:
    """Every problem of the simulated joint's flat (dotted) parameters, and the setup if there is none."""
    problems = Problems()
    top = _settings(params, SIM_SETTINGS, problems)
    if top.get("substeps", 1) < 1:
        problems.found.append(ConfigError("substeps", f"must be at least 1, got {top['substeps']}"))
    names = top.pop("joint_names", None)
    if names is None:
        return Checked(None, tuple(problems.found))
    robot = describes_robot(params, SIM_NODE)
    joints = [_sim_joint(params, n, robot, problems) for n in names]
    problems.found += unknown_key_errors(params, SIM_NODE, names, robot)
    source = problems.attempt(robot_source, params, SIM_NODE)
    links = None if problems.found else problems.attempt(build_links, source, names, [j.plant for j in joints])
    contact = None if problems.found else problems.attempt(_contact, top, links)
    if problems.found:
        return Checked(None, tuple(problems.found))
    return Checked(SimSetup(joints=tuple(joints), links=links, urdf_source=source and source.origin,
                            contact=contact, **_plain(top, SIM_NODE)), ())


def _plain(top: dict, node: str) -> dict:
    """The top-level settings that are setup fields as they are (the robot section's are built)."""
    return {k: v for k, v in top.items() if k not in URDF_KEYS[node] and not k.startswith("contact.")}


def _contact(top: dict, links) -> PlaneContact | None:
    """The floor plane of the ``contact.*`` settings; None without a frame."""
    frame = top["contact.frame"]
    if not frame:
        return None
    if not hasattr(links, "frame_position"):
        raise ConfigError("contact.frame", "a floor contact needs the robot's geometry: name a URDF "
                                           "(robot_urdf or robot_description)")
    if frame not in links.frame_names:
        raise ConfigError("contact.frame", f"no frame {frame!r} in {links.source}")
    return PlaneContact(frame, height=top["contact.height"], stiffness=top["contact.stiffness"],
                        damping=top["contact.damping"], speed=top["contact.rise_speed"],
                        start_time=top["contact.rise_start"], rise_time=top["contact.rise_time"])


def contact_parameters(contact: PlaneContact) -> dict:
    """The ``contact.*`` settings of a floor (the inverse of the simulated robot's reading of them)."""
    return {"contact.frame": contact.frame, "contact.height": contact.height, "contact.stiffness": contact.stiffness,
            "contact.damping": contact.damping, "contact.rise_speed": contact.speed,
            "contact.rise_start": contact.start_time, "contact.rise_time": contact.rise_time}


def sim_setup(params: dict) -> SimSetup:
    """Validated simulated-joint setup from flat (dotted) parameters; raises the first ConfigError."""
    return _setup(sim_check(params))


def launch_parameters(files, node: str, law: str = "", urdf: str = ""):
    """What a launch file hands to ``node``: its files layered, ``law`` and ``urdf`` applied, checked.

    Parameters
    ----------
    files : sequence of path
        Parameter files, layered in order (:func:`layered_parameters`).
    node : str
        CONTROLLER_NODE or SIM_NODE.
    law : str
        Controller only: a law overriding the files' (empty: keep).
    urdf : str
        A URDF file (path or ``package://``) handed to the node as ``robot_description``, replacing
        the robot the files name (robot_section.with_urdf_file); empty: keep what the files say.

    Returns
    -------
    (dict, ControllerSetup or SimSetup)
        The flat parameters for the node and their validated setup.

    Raises
    ------
    ConfigError
        Before any node starts: a setup problem keyed ``NODE.KEY`` (as ``cdamp check-config``
        prints it), a robot_description from ``urdf`` that does not suit the joints with the file
        named in the reason, a ``urdf`` file that cannot be read keyed ``urdf``, a YAML error
        keyed ``FILE:LINE:COL``.
    """
    params = layered_parameters(files, node)
    if law:
        params["law"] = law
    if urdf:
        params = with_urdf_file(params, node, urdf)
    try:
        setup = (controller_setup if node == CONTROLLER_NODE else sim_setup)(params)
    except ConfigError as err:
        reason = err.reason
        if urdf and err.key == URDF_KEYS[node][1]:
            reason = f"{reason} (robot_description read from {URDF_ARGUMENT}:={urdf})"
        raise ConfigError(f"{node}.{err.key}", reason) from None
    return params, setup


def load(*paths):
    """(ControllerSetup, SimSetup) from one parameter file, or several layered in order."""
    return controller_setup(layered_parameters(paths, CONTROLLER_NODE)), sim_setup(layered_parameters(paths, SIM_NODE))


def load_controller(*paths) -> ControllerSetup:
    """ControllerSetup alone, for files without a simulated joint (hardware_template.yaml), layered in order."""
    return controller_setup(layered_parameters(paths, CONTROLLER_NODE))
