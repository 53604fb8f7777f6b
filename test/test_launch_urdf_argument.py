"""The launch files' ``urdf`` argument: a URDF file handed to the nodes as ``robot_description``,
checked before any node starts.

The first tests check compliant_damping.io.config.launch_parameters, which both launch files call,
and run everywhere. The last ones load the launch files themselves and need the ROS 2 launch
packages (``launch``, ``launch_ros``): they skip with the reason without them. Outside references:

* the file's text as Python reads it (``pathlib``): the parameter is the URDF document itself;
* Pinocchio's URDF reader on the file (``pinocchio.buildModelFromUrdf``) with its CRBA and its
  generalized gravity: the robot the nodes build from the launch's ``robot_description`` is the
  file's robot;
* Python's XML parser (``xml.etree.ElementTree``): the broken file is not well-formed XML, and
  the joints the edited file declares lack the one the parameter file names;
* launch_ros's own parameter evaluation (``launch_ros.utilities``): the URDF text the launch
  files put in the node's parameters comes out unchanged.
"""
import importlib.util
import logging
import xml.etree.ElementTree as ET
from pathlib import Path

import numpy as np
import pytest

from compliant_damping.io import config

ROOT = Path(__file__).resolve().parent.parent
LEG_FILE = ROOT / "config" / "compliant_leg.yaml"
LEG_URDF = ROOT / "urdf" / "compliant_leg.urdf"
LEG_JOINTS = ["hip_pitch", "knee_pitch", "ankle_pitch"]
NODES = (config.CONTROLLER_NODE, config.SIM_NODE)
FILE_KEY = {config.CONTROLLER_NODE: "nominal_urdf", config.SIM_NODE: "robot_urdf"}


@pytest.fixture
def broken_urdfs(tmp_path):
    """{case: (path, expected key, words of the reason)} of URDF files the launch must refuse."""
    truncated = tmp_path / "truncated.urdf"
    text = LEG_URDF.read_text()
    truncated.write_text(text[: len(text) // 2])
    no_ankle = tmp_path / "no_ankle.urdf"
    no_ankle.write_text(text.replace('joint name="ankle_pitch"', 'joint name="ankle_roll"'))
    empty = tmp_path / "empty.urdf"
    empty.write_text("\n")
    # Outside confirmation of what is wrong with them (Python's XML parser):
    with pytest.raises(ET.ParseError):
        ET.fromstring(truncated.read_text())
    joints = [j.get("name") for j in ET.fromstring(no_ankle.read_text()).iter("joint")]
    assert "ankle_pitch" not in joints and {"hip_pitch", "knee_pitch"} <= set(joints)
    return {
        "not well-formed": (truncated, "robot_description", ["not a well-formed URDF", f"urdf:={truncated}"]),
        "joint missing": (no_ankle, "robot_description", ["ankle_pitch", "no such joint", f"urdf:={no_ankle}"]),
        "no such file": (tmp_path / "missing.urdf", "urdf", ["cannot read", "No such file"]),
        "empty": (empty, "urdf", ["empty"]),
    }


@pytest.mark.parametrize("node", NODES)
def test_urdf_argument_becomes_robot_description(node):
    """The file's text replaces the file key, and the robot built from it is the file's robot."""
    pin = pytest.importorskip("pinocchio", reason="URDF robots are built with Pinocchio (pip install pin)")
    params, setup = config.launch_parameters([LEG_FILE], node, urdf=str(LEG_URDF))
    assert params["robot_description"] == LEG_URDF.read_text()  # the document itself (pathlib)
    assert FILE_KEY[node] not in params  # at most one of the two keys
    assert setup.urdf_source == "robot_description" and setup.joint_names == LEG_JOINTS
    model = pin.buildModelFromUrdf(str(LEG_URDF))  # joints in the file's order: hip, knee, ankle
    data = model.createData()
    for q in (np.zeros(3), np.array([-0.5, 1.0, -0.5]), np.array([0.3, 2.0, 0.6])):
        np.testing.assert_allclose(setup.links.mass_matrix(q), pin.crba(model, data, q), rtol=1e-12, atol=1e-12)
        np.testing.assert_allclose(setup.links.gravity(q), pin.computeGeneralizedGravity(model, data, q),
                                   rtol=1e-12, atol=1e-12)


@pytest.mark.parametrize("node", NODES)
def test_without_urdf_argument_the_files_robot_stays(node):
    params, setup = config.launch_parameters([LEG_FILE], node)
    assert params[FILE_KEY[node]] == "package://compliant_damping/urdf/compliant_leg.urdf"
    assert "robot_description" not in params
    assert Path(setup.urdf_source).resolve() == LEG_URDF.resolve()


def test_urdf_argument_replaces_a_robot_description_of_the_files(tmp_path):
    """A layer that adds robot_description beside the file's nominal_urdf is refused (at most one of the
    two); with ``urdf`` both give way to the file."""
    layer = tmp_path / "layer.yaml"
    layer.write_text(f"{config.CONTROLLER_NODE}:\n  ros__parameters:\n    robot_description: '<robot name=\"x\"/>'\n")
    with pytest.raises(config.ConfigError, match=r"^damping_controller\.robot_description: give the robot as "
                                                 r"nominal_urdf or as robot_description, not both"):
        config.launch_parameters([LEG_FILE, layer], config.CONTROLLER_NODE)
    params, _ = config.launch_parameters([LEG_FILE, layer], config.CONTROLLER_NODE, urdf=str(LEG_URDF))
    assert params["robot_description"] == LEG_URDF.read_text() and "nominal_urdf" not in params


@pytest.mark.parametrize("case", ["not well-formed", "joint missing", "no such file", "empty"])
@pytest.mark.parametrize("node", NODES)
def test_a_bad_urdf_is_refused_naming_the_key_and_reason(node, case, broken_urdfs):
    path, key, words = broken_urdfs[case]
    with pytest.raises(config.ConfigError) as refused:
        config.launch_parameters([LEG_FILE], node, urdf=str(path))
    message = str(refused.value)
    assert message.startswith(f"{node}.{key}: " if key == "robot_description" else f"{key}: "), message
    for word in words:
        assert word in message, message


def test_a_built_in_joint_file_with_a_urdf_names_the_link_key():
    """The one-joint bench file gives link keys, which a URDF robot refuses (the URDF gives the links)."""
    with pytest.raises(config.ConfigError, match=r"^damping_controller\.knee\.model\.\w+: the URDF gives the links"):
        config.launch_parameters([config.bundled()], config.CONTROLLER_NODE, urdf=str(LEG_URDF))


# The launch files themselves (need the ROS 2 launch packages).

@pytest.fixture
def launch_packages():
    """Skips the test, with the reason, without the ROS 2 launch packages."""
    pytest.importorskip("launch", reason="the launch files need the ROS 2 launch packages (launch)")
    pytest.importorskip("launch_ros", reason="the launch files need the ROS 2 launch packages (launch_ros)")


def _launch_module(name):
    """The launch file ``launch/NAME.launch.py`` as a module."""
    spec = importlib.util.spec_from_file_location(f"{name}_launch", ROOT / "launch" / f"{name}.launch.py")
    module = importlib.util.module_from_spec(spec)
    spec.loader.exec_module(module)
    return module


def _context(**arguments):
    from launch import LaunchContext
    context = LaunchContext()
    context.launch_configurations.update({"layer_file": "", "law": "", "namespace": "", "urdf": "",
                                          "use_sim_time": "false", "auto_activate": "true", **arguments})
    return context


@pytest.mark.launch
@pytest.mark.parametrize("case", ["not well-formed", "joint missing"])
def test_launch_files_refuse_a_bad_urdf_before_building_a_node(launch_packages, case, broken_urdfs):
    """The functions that build the nodes raise instead of returning them: nothing is started."""
    path, key, words = broken_urdfs[case]
    context = _context(params_file=str(LEG_FILE), urdf=str(path))
    with pytest.raises(config.ConfigError, match=rf"^damping_controller\.{key}: "):
        _launch_module("controller")._controller(context)
    with pytest.raises(config.ConfigError, match=rf"^simulated_joint\.{key}: "):  # the simulated robot is checked first
        _launch_module("simulated_joint")._nodes(context)


@pytest.mark.launch
def test_a_launch_service_stops_on_a_bad_urdf_before_any_process(launch_packages, broken_urdfs):
    """A real launch of controller.launch.py: it ends with an error naming the key, and no process starts."""
    from launch import LaunchDescription, LaunchService
    from launch.actions import IncludeLaunchDescription, RegisterEventHandler
    from launch.event_handlers import OnProcessStart
    from launch.launch_description_sources import PythonLaunchDescriptionSource
    path, _, _ = broken_urdfs["joint missing"]
    started, logged = [], []
    handler = logging.Handler()
    handler.emit = lambda record: logged.append(record.getMessage())
    logging.getLogger("launch").addHandler(handler)
    service = LaunchService()
    service.include_launch_description(LaunchDescription([
        RegisterEventHandler(OnProcessStart(on_start=lambda event, context: started.append(event.action))),
        IncludeLaunchDescription(PythonLaunchDescriptionSource(str(ROOT / "launch" / "controller.launch.py")),
                                 launch_arguments={"params_file": str(LEG_FILE), "urdf": str(path)}.items())]))
    try:
        assert service.run() != 0
    finally:
        logging.getLogger("launch").removeHandler(handler)
    assert started == []
    assert any("damping_controller.robot_description: ankle_pitch: no such joint" in m for m in logged), logged


@pytest.mark.launch
def test_the_urdf_text_survives_launch_ros_parameter_evaluation(launch_packages):
    """launch_ros turns a dict of parameters into the node's parameter file through YAML (a plain string is
    dumped, then read back): the URDF, comments with ``: `` and all, comes out as the file's text."""
    from launch_ros.utilities import evaluate_parameters, normalize_parameters
    for node in NODES:
        params, _ = config.launch_parameters([LEG_FILE], node, urdf=str(LEG_URDF))
        (evaluated,) = evaluate_parameters(_context(), normalize_parameters([params]))
        assert evaluated["robot_description"] == LEG_URDF.read_text()
        assert evaluated["joint_names"] == tuple(LEG_JOINTS)
