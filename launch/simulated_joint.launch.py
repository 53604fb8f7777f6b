"""Simulated series-elastic joints and the damping controller, configured and activated.

    ros2 launch compliant_damping simulated_joint.launch.py [params_file:=FILE] [law:=NAME] [namespace:=NS]

Launch arguments:

``params_file`` (default: the bundled ``config/one_joint.yaml`` from the package share directory)
    Full parameter file with a ``damping_controller`` and a ``simulated_joint`` section
    (e.g. ``config/three_joints.yaml``).
``layer_file`` (default: none)
    A file layered over ``params_file`` for the controller, key by key (``config/laws/*.yaml``).
``law`` (default: the files' law)
    Law name overriding the files.
``namespace`` (default: none)
    Namespace of both nodes and their topics.

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
    params = config.layered_parameters([arg("params_file")], config.SIM_NODE)
    lock_step = config.sim_setup(params).lock_step  # also refuses a bad file, with the key and the reason
    forwarded = [(name, arg(name)) for name in ("params_file", "layer_file", "law", "namespace")]
    return [  # the controller first: a bad controller file stops the launch before anything runs
        IncludeLaunchDescription(
            PythonLaunchDescriptionSource(str(Path(__file__).with_name("controller.launch.py"))),
            launch_arguments=forwarded + [("auto_activate", "true"),
                                          ("use_sim_time", "true" if lock_step else "false")]),
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
        DeclareLaunchArgument("namespace", default_value="", description="namespace of both nodes and their topics"),
        OpaqueFunction(function=_nodes),
    ])
