"""ROS parameters of both nodes, declared from parameter_keys.parameter_specs (one source of keys,
defaults, units and docs). Types are checked by config, with the same messages as for files,
so the descriptors allow any type; only ``joint_names`` is typed and read-only.

Unknown keys: rcl keeps every value a parameter file or ``-p`` gives a node, declared or not,
and rclpy would silently ignore the undeclared ones (a misspelt optional limit would be off).
The nodes are therefore built with :data:`NODE_OPTIONS` (rclpy declares every given value at
construction), :func:`declare` re-declares the known keys with their descriptions and leaves the
others in the key list, so config refuses them by name with a did-you-mean.

Both nodes build their setups with :func:`setup`, at start-up and for every run-time change. Both
run the built-in joints or a URDF robot (the robot section, io/robot_section.py: a URDF file key
or ``robot_description``). A node given a URDF declares the drive's per-joint keys only
(parameter_keys.parameter_specs with ``robot``), so a link key is refused as the URDF's; which
robot it runs is therefore fixed when the node starts (:func:`robot_changes`).
"""
from __future__ import annotations

from dataclasses import MISSING

from rcl_interfaces.msg import ParameterDescriptor, SetParametersResult
from rclpy.exceptions import ParameterUninitializedException
from rclpy.parameter import Parameter

from compliant_damping.io import config, parameter_keys
from compliant_damping.io.robot_section import URDF_KEYS, describes_robot

_SETUPS = {config.CONTROLLER_NODE: config.controller_setup, config.SIM_NODE: config.sim_setup}
NODE_OPTIONS = {"automatically_declare_parameters_from_overrides": True}  # rclpy.node.Node keywords
ROS_OWN = frozenset({"use_sim_time", "start_type_description_service"})  # declared by rclpy's Node itself


def declare(node, node_name: str) -> list:
    """Declare every key of ``node_name`` (joint_names first); returns the dotted keys.

    ``node`` was made with NODE_OPTIONS: the values given to it that are not keys of
    ``node_name`` (nor rclpy's own, ROS_OWN) stay declared as given and end the list, so
    config.controller_setup / config.sim_setup refuse them naming the key.
    """
    given = set(node.get_parameters_by_prefix("")) - ROS_OWN
    doc = next(s.description for s in parameter_keys.parameter_specs(node_name, []) if s.key == "joint_names")
    names = _redeclare(node, "joint_names", Parameter.Type.STRING_ARRAY,
                       ParameterDescriptor(description=doc, read_only=True)).value or []
    keys = ["joint_names"]
    for spec in parameter_keys.parameter_specs(node_name, names, _names_robot(node, node_name)):
        if spec.key == "joint_names":
            continue
        default = None if spec.default is MISSING else spec.default
        _redeclare(node, spec.key, default, ParameterDescriptor(description=spec.description, dynamic_typing=True))
        keys.append(spec.key)
    return keys + sorted(given - set(keys))


def _redeclare(node, key: str, default, descriptor: ParameterDescriptor):
    """Declare ``key`` with ``descriptor``; a value given to the node (declared from it by rclpy) is kept."""
    if node.has_parameter(key):
        node.undeclare_parameter(key)  # the given value stays in rclpy's overrides and wins below
    return node.declare_parameter(key, default, descriptor)


def unknown_keys(node, node_name: str, changes) -> str | None:
    """Reason to refuse a run-time change of a key ``node_name`` does not know (with a did-you-mean), or None.

    ``changes``: the rclpy Parameters of a set-parameters callback. A given unknown value is
    declared (see the module notes), so ``ros2 param set`` reaches the callbacks with it.
    """
    names = _get(node, "joint_names").value or []
    robot = _names_robot(node, node_name)
    known = {s.key for s in parameter_keys.parameter_specs(node_name, names, robot)}
    unknown = sorted(p.name for p in changes if p.name not in known | ROS_OWN)
    return str(parameter_keys.unknown_key(unknown[0], node_name, names, robot)) if unknown else None


def _names_robot(node, node_name: str) -> bool:
    """Whether the node's current values of its URDF keys name a robot (robot_section.describes_robot)."""
    return describes_robot({k: node.get_parameter(k).value for k in URDF_KEYS[node_name] if node.has_parameter(k)},
                           node_name)


def values(node, keys, changes=()) -> dict:
    """Flat parameters as config reads them: current values of ``keys`` (unset ones left out), then ``changes``."""
    out = {}
    for p in [*(_get(node, k) for k in keys), *changes]:
        if p.type_ == Parameter.Type.NOT_SET:
            out.pop(p.name, None)
        else:
            out[p.name] = list(p.value) if p.type_ == Parameter.Type.STRING_ARRAY else p.value
    return out


def setup(node, node_name: str, keys, changes=()):
    """The setup of ``node_name`` (config.controller_setup / config.sim_setup) from :func:`values`.

    Raises
    ------
    config.ConfigError
        Any problem config finds (for a URDF robot: a URDF that does not parse or lacks a joint,
        naming the key that gives it).
    """
    return _SETUPS[node_name](values(node, keys, changes))


def robot_changes(node, node_name: str, keys, changes) -> str | None:
    """Reason to refuse a run-time change of ``node_name``'s URDF keys (robot_section.URDF_KEYS), or None.

    The robot decides which per-joint keys the node declared at start (:func:`declare`), so it
    cannot change while the node runs, configured or not.
    """
    urdf = sorted(set(changed(node, keys, changes)) & set(URDF_KEYS[node_name]))
    return (f"{urdf[0]}: fixed after start (the robot decides the node's parameters); start the node with "
            "the robot to run" if urdf else None)


def _get(node, key):
    try:
        return node.get_parameter(key)
    except ParameterUninitializedException:  # joint_names (typed) not given
        return Parameter(key, Parameter.Type.NOT_SET, None)


def changed(node, keys, params) -> dict:
    """{name: new value} of the parameters in ``params`` whose value differs from the current one."""
    now = values(node, keys)
    new = values(node, [], params)
    return {k: v for k, v in new.items() if now.get(k) != v}


def result(reason: str | None) -> SetParametersResult:
    """Accept (reason None) or refuse with the reason."""
    return SetParametersResult(successful=reason is None, reason=reason or "")


def answer(node, node_name: str, changes, apply) -> SetParametersResult:
    """The set-parameters answer of both nodes: deletes and unknown keys are refused outright,
    then ``apply(changes)`` gives the reason to refuse (or None once applied); refusals are logged."""
    deleted = [p.name for p in changes if p.type_ == Parameter.Type.NOT_SET]
    reason = (f"{deleted[0]}: parameters cannot be deleted (set a new value instead)" if deleted
              else unknown_keys(node, node_name, changes))
    if reason is None:
        reason = apply(changes)
    if reason is not None:
        node.get_logger().warning(f"parameter change refused: {reason}")
    return result(reason)
