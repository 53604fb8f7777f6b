"""The robot section of a parameter file: where the links come from, and the floor contact.

Each node section names its own robot description, so the controller's nominal model and the
simulated robot can differ (that is how a model mismatch is studied):

* controller (``damping_controller``): ``nominal_urdf`` or ``robot_description``;
* simulated robot (``simulated_joint``): ``robot_urdf`` or ``robot_description``, and the
  ``contact.*`` keys of a push-only floor plane under a named URDF frame.

``*_urdf`` is a file: a path (absolute, or relative to the working directory as ROS resolves
it) or ``package://PACKAGE/PATH`` (this package through its share folder, others through the
ament index). ``robot_description`` is the URDF document itself, the ROS convention for passing a
robot to a node. At most one of the two may be set; with neither, the joints are the built-in
independent pendulum joints and their link parameters are per-joint keys. With a URDF, every
joint in ``joint_names`` is an elastic revolute joint of it and the link keys
(model.LINK_KEYS) are refused: the URDF gives the links.

The launch files take a URDF file as the launch argument ``urdf`` and hand its text to the nodes
as ``robot_description`` (:func:`with_urdf_file`), as ROS passes a robot to a node.
"""
from __future__ import annotations

from dataclasses import dataclass
from pathlib import Path

from compliant_damping.dynamics.links import IndependentLinks, RobotModelError
from compliant_damping.io.parameter_files import ConfigError, share_dir

__all__ = ["URDF_KEYS", "URDF_ARGUMENT", "RobotSource", "robot_source", "describes_robot", "resolve_package_uri",
           "build_links", "with_urdf_file"]

# The two ways each node section names a URDF: (file key, string key).
URDF_KEYS = {"damping_controller": ("nominal_urdf", "robot_description"),
             "simulated_joint": ("robot_urdf", "robot_description")}
PACKAGE_SCHEME = "package://"
URDF_ARGUMENT = "urdf"  # the launch files' argument: a URDF file handed to the nodes as robot_description


@dataclass(frozen=True)
class RobotSource:
    """A URDF named by a node section: the key it came from, the document and where it was read."""

    key: str        # the parameter that names it (for errors)
    xml: str        # the URDF document
    origin: str     # file path, or "robot_description"


def describes_robot(params: dict, node: str) -> bool:
    """Whether the flat parameters of ``node`` name a URDF (either key set to a non-empty string)."""
    return any(isinstance(params.get(k), str) and params.get(k) for k in URDF_KEYS[node])


def resolve_package_uri(key: str, uri: str) -> Path:
    """File of a ``package://PACKAGE/PATH`` URI: this package's share folder, else the ament index.

    Raises
    ------
    ConfigError
        Naming ``key``: a malformed URI, or a package the ament index does not know (or no index).
    """
    package, _, rest = uri[len(PACKAGE_SCHEME):].partition("/")
    if not package or not rest:
        raise ConfigError(key, f"expected package://PACKAGE/PATH, got {uri!r}")
    if package == "compliant_damping":
        return share_dir() / rest
    no_index = ConfigError(key, f"{uri}: package {package!r} can only be found through the ament index "
                                "(source a ROS 2 workspace), or give a path")
    try:
        from ament_index_python.packages import PackageNotFoundError, get_package_share_directory
    except ImportError:
        raise no_index from None
    try:
        return Path(get_package_share_directory(package)) / rest
    except PackageNotFoundError:
        raise ConfigError(key, f"{uri}: package {package!r} is not in the ament index") from None
    except OSError:  # no index to search: AMENT_PREFIX_PATH unset or empty
        raise no_index from None


def robot_source(params: dict, node: str) -> RobotSource | None:
    """The URDF that ``node``'s flat parameters name, read; None for the built-in joints.

    Raises
    ------
    ConfigError
        Both keys set, or a file that cannot be read, naming the key.
    """
    file_key, text_key = URDF_KEYS[node]
    path, text = params.get(file_key) or "", params.get(text_key) or ""
    if path and text:
        raise ConfigError(text_key, f"give the robot as {file_key} or as {text_key}, not both")
    if text:
        return RobotSource(text_key, text, "robot_description")
    if not path:
        return None
    file = resolve_package_uri(file_key, path) if path.startswith(PACKAGE_SCHEME) else Path(path)
    try:
        return RobotSource(file_key, file.read_text(), str(file))
    except OSError as err:
        raise ConfigError(file_key, f"cannot read the URDF {file} ({err.strerror})") from None


def build_links(source: RobotSource | None, joint_names, link_params=()):
    """Link dynamics for the joints: a URDF chain, or the built-in independent joints.

    Parameters
    ----------
    source : RobotSource or None
        The URDF (:func:`robot_source`); None for the built-in joints.
    joint_names : sequence of str
        The elastic joints, in order.
    link_params : sequence
        Built-in joints only: per joint a record with ``link_inertia``, ``gravity_torque`` and
        ``gravity_offset`` (laws.NominalModel or model.JointParams).

    Raises
    ------
    ConfigError
        Naming the URDF key and, in the reason, the joint, link or frame at fault (a URDF that
        does not parse, a joint not in it or not revolute, a moving link without inertia).
    """
    if source is None:
        return IndependentLinks.from_params(joint_names, link_params)
    from compliant_damping.dynamics.urdf_chain import UrdfChain
    try:
        return UrdfChain(source.xml, joint_names, source=source.origin)
    except RobotModelError as err:  # the reason alone where it names the key itself (robot_description)
        raise ConfigError(source.key, err.reason if err.key == source.key else str(err)) from None


def with_urdf_file(params: dict, node: str, path: str) -> dict:
    """``node``'s flat parameters with the URDF file ``path`` as ``robot_description``.

    The text of the file replaces whatever robot the parameters named (their file key,
    ``nominal_urdf`` or ``robot_urdf``, is dropped, as at most one of the two may be set); ``path``
    is a path or ``package://PACKAGE/PATH``. Whether the URDF suits the joints is not checked here
    (config.controller_setup / config.sim_setup do that).

    Raises
    ------
    ConfigError
        Naming :data:`URDF_ARGUMENT`: a file that cannot be read or is empty (an empty
        ``robot_description`` would silently mean the built-in joints).
    """
    file = resolve_package_uri(URDF_ARGUMENT, path) if path.startswith(PACKAGE_SCHEME) else Path(path)
    try:
        text = file.read_text()
    except OSError as err:
        raise ConfigError(URDF_ARGUMENT, f"cannot read the URDF {file} ({err.strerror})") from None
    except UnicodeDecodeError as err:
        raise ConfigError(URDF_ARGUMENT, f"{file} is not a text file ({err.reason})") from None
    if not text.strip():
        raise ConfigError(URDF_ARGUMENT, f"{file} is empty: a URDF is needed")
    file_key, text_key = URDF_KEYS[node]
    out = {k: v for k, v in params.items() if k != file_key}
    out[text_key] = text
    return out
