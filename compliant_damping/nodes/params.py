"""ROS parameters of both nodes, declared from config.parameter_specs (one source of keys,
defaults, units and docs). Types are checked by config, with the same messages as for files,
so the descriptors allow any type; only ``joint_names`` is typed and read-only.
"""
from __future__ import annotations

from rcl_interfaces.msg import ParameterDescriptor, SetParametersResult
from rclpy.exceptions import ParameterUninitializedException
from rclpy.parameter import Parameter

from .. import config


def declare(node, node_name: str) -> list:
    """Declare every key of ``node_name`` (joint_names first); returns the dotted keys."""
    doc = next(s.description for s in config.parameter_specs(node_name, []) if s.key == "joint_names")
    names = node.declare_parameter("joint_names", Parameter.Type.STRING_ARRAY,
                                   ParameterDescriptor(description=doc, read_only=True)).value or []
    keys = ["joint_names"]
    for spec in config.parameter_specs(node_name, names):
        if spec.key == "joint_names":
            continue
        default = None if spec.default is config.MISSING else spec.default
        node.declare_parameter(spec.key, default,
                               ParameterDescriptor(description=spec.description, dynamic_typing=True))
        keys.append(spec.key)
    return keys


def values(node, keys, changes=()) -> dict:
    """Flat parameters as config reads them: current values of ``keys`` (unset ones left out), then ``changes``."""
    out = {}
    for p in [*(_get(node, k) for k in keys), *changes]:
        if p.type_ == Parameter.Type.NOT_SET:
            out.pop(p.name, None)
        else:
            out[p.name] = list(p.value) if p.type_ == Parameter.Type.STRING_ARRAY else p.value
    return out


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
