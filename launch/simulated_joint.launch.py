"""Simulated series-elastic joints or a simulated URDF robot, and the damping controller, configured and activated.

    ros2 launch compliant_damping simulated_joint.launch.py [params_file:=FILE] [urdf:=FILE] [law:=NAME] [namespace:=NS]

Launch arguments:

``params_file`` (default: the bundled ``config/one_joint.yaml`` from the package share directory)
    Full parameter file with a ``damping_controller`` and a ``simulated_joint`` section
    (e.g. ``config/three_joints.yaml``, or ``config/compliant_leg.yaml``, a three-joint leg whose
    sections name its URDF by file).
``layer_file`` (default: none)
    A file layered over ``params_file`` for the controller, key by key (``config/laws/*.yaml``).
``law`` (default: the files' law)
    Law name overriding the files.
``urdf`` (default: none, keep the robot the file names)
    A URDF file (path, or ``package://PACKAGE/PATH``). The launch reads it and hands its text to
    BOTH nodes as the ``robot_description`` parameter, the ROS convention, replacing the
    ``robot_urdf`` of the simulated joint and the ``nominal_urdf`` of the controller (or a
    ``robot_description`` of the file): the simulated robot and the controller's model are then
    the same URDF. For example, with the bundled leg::

        ros2 launch compliant_damping simulated_joint.launch.py \\
            params_file:=config/compliant_leg.yaml urdf:=urdf/compliant_leg.urdf

``namespace`` (default: none)
    Namespace of both nodes and their topics.

Before anything starts, both nodes' parameters (files, ``law`` and ``urdf`` applied) are checked
as the nodes will check them (compliant_damping.io.config.launch_parameters): a bad key, a URDF
file that cannot be read, a URDF that does not parse or lacks a joint of ``joint_names`` stop the
launch with ``simulated_joint.KEY: reason`` or ``damping_controller.KEY: reason`` (``urdf: reason``
for a file that cannot be read).

The controller part is controller.launch.py with ``auto_activate:=true``: in simulation it is
configured and activated at once. When the file puts the simulated joint in lock step, the
controller runs on its ``/clock`` (``use_sim_time``), as a lock-step loop needs. Both executables come from the ament index, so this needs a
colcon workspace or an ``AMENT_PREFIX_PATH`` laid out like one (see controller.launch.py).
"""
from pathlib import Path

from launch import LaunchDescription
from launch.actions import DeclareLaunchArgument, IncludeLaunchDescription, OpaqueFunction
from launch.launch_description_sources import PythonLaunchDescriptionSource
from launch.substitutions import LaunchConfiguration, PathJoinSubstitution
from launch_ros.actions import Node
from launch_ros.substitutions import FindPackageShare

from compliant_damping.io import config

PACKAGE = "compliant_damping"


def _nodes(context):
    def arg(name):
        return LaunchConfiguration(name).perform(context)
    # Both nodes' parameters are checked here, before anything starts; each refusal names the key and the reason.
    params, sim = config.launch_parameters([arg("params_file")], config.SIM_NODE, urdf=arg("urdf"))
    controller_files = [arg("params_file")] + ([arg("layer_file")] if arg("layer_file") else [])
    config.launch_parameters(controller_files, config.CONTROLLER_NODE, law=arg("law"), urdf=arg("urdf"))
    forwarded = [(name, arg(name)) for name in ("params_file", "layer_file", "law", "namespace", "urdf")]
    return [
        IncludeLaunchDescription(
            PythonLaunchDescriptionSource(str(Path(__file__).with_name("controller.launch.py"))),
            launch_arguments=forwarded + [("auto_activate", "true"),
                                          ("use_sim_time", "true" if sim.lock_step else "false")]),
        Node(package=PACKAGE, executable="simulated_joint", name=config.SIM_NODE,
             namespace=arg("namespace"), parameters=[params], output="screen"),
    ]


def generate_launch_description():
    return LaunchDescription([
        DeclareLaunchArgument("params_file",
                              default_value=PathJoinSubstitution([FindPackageShare(PACKAGE), "config",
                                                                  "one_joint.yaml"]),
                              description="full parameter file (controller and simulated joint)"),
        DeclareLaunchArgument("layer_file", default_value="",
                              description="optional file layered over params_file for the controller"),
        DeclareLaunchArgument("law", default_value="", description="law overriding the files' law (empty: keep)"),
        DeclareLaunchArgument("urdf", default_value="",
                              description="URDF file handed to both nodes as robot_description "
                                          "(empty: keep the file's)"),
        DeclareLaunchArgument("namespace", default_value="", description="namespace of both nodes and their topics"),
        OpaqueFunction(function=_nodes),
    ])
