"""The damping controller alone, as on a real joint (the hardware driver is the plant).

    ros2 launch compliant_damping controller.launch.py params_file:=/path/to/joint.yaml

Launch arguments:

``params_file`` (required)
    Parameter file with a ``damping_controller`` section; start from the bundled
    ``config/hardware_template.yaml``. Checked with compliant_damping.io.config before the node starts.
``layer_file`` (default: none)
    A second file layered over ``params_file`` key by key, as with a second ``--params-file``
    (e.g. one of ``config/laws/*.yaml``).
``law`` (default: the files' law)
    Law name overriding the files.
``urdf`` (default: none, keep the robot the files name)
    A URDF file (path, or ``package://PACKAGE/PATH``). The launch reads it and hands its text
    to the node as the ``robot_description`` parameter, the ROS convention; a ``nominal_urdf``
    (or ``robot_description``) of the files is dropped, since the node takes at most one of them.
    The joints of ``joint_names`` must then be revolute joints of this URDF, and the files may
    give only the drive of each joint (no link keys: the URDF gives the links).
``namespace`` (default: none)
    Namespace of the node and of its relative topics (``joint_states``, ``motor_effort``, ...).
``use_sim_time`` (default ``false``)
    ``true`` runs the controller on ``/clock`` (a lock-step simulated joint publishes it), so its
    watchdog counts simulated time.
``auto_activate`` (default ``false``)
    ``true`` configures and activates the managed node at once. With the default it waits,
    unconfigured and silent, for you to look at ``joint_states`` and then run::

        ros2 lifecycle set [/namespace]/damping_controller configure
        ros2 lifecycle set [/namespace]/damping_controller activate

    Keep the default on hardware. ``deactivate`` ramps the torque to zero and stays inactive
    (auto activation acts once, on the first configure only).

Before the node starts, the files with ``law`` and ``urdf`` applied are checked as the node
will check them (compliant_damping.io.config.launch_parameters): a bad key, a URDF file that
cannot be read, a URDF that does not parse or lacks a joint of ``joint_names`` stop the launch
with ``damping_controller.KEY: reason`` (``urdf: reason`` for a file that cannot be read).

The file's section is handed to the node under its full name, so the parameters apply in any
namespace. The executable comes from the ament index (``lib/compliant_damping/damping_controller``):
use a colcon workspace (``source install/setup.bash``) or an ``AMENT_PREFIX_PATH`` laid out like one.
"""
from launch import LaunchDescription
from launch.actions import DeclareLaunchArgument, EmitEvent, OpaqueFunction, RegisterEventHandler
from launch.conditions import IfCondition
from launch.events import matches_action
from launch.substitutions import LaunchConfiguration
from launch_ros.actions import LifecycleNode
from launch_ros.event_handlers import OnStateTransition
from launch_ros.events.lifecycle import ChangeState
from lifecycle_msgs.msg import Transition

from compliant_damping.io import config

PACKAGE = "compliant_damping"


def _transition(node, transition_id, **kwargs):
    """Request a lifecycle transition of the launched ``node``."""
    return EmitEvent(event=ChangeState(lifecycle_node_matcher=matches_action(node), transition_id=transition_id),
                     **kwargs)


def _controller(context):
    def arg(name):
        return LaunchConfiguration(name).perform(context)
    files = [arg("params_file")] + ([arg("layer_file")] if arg("layer_file") else [])
    # refuse a bad file or URDF here, before the node starts, with the key and the reason
    params, _ = config.launch_parameters(files, config.CONTROLLER_NODE, law=arg("law"), urdf=arg("urdf"))
    params["use_sim_time"] = arg("use_sim_time") == "true"
    node = LifecycleNode(package=PACKAGE, executable="damping_controller", name=config.CONTROLLER_NODE,
                         namespace=arg("namespace"), parameters=[params], output="screen")
    auto = IfCondition(arg("auto_activate"))
    activate_once_configured = RegisterEventHandler(OnStateTransition(
        target_lifecycle_node=node, start_state="configuring", goal_state="inactive", handle_once=True,
        entities=[_transition(node, Transition.TRANSITION_ACTIVATE)]), condition=auto)
    return [node, activate_once_configured, _transition(node, Transition.TRANSITION_CONFIGURE, condition=auto)]


def generate_launch_description():
    return LaunchDescription([
        DeclareLaunchArgument("params_file", description="parameter file with a damping_controller section"),
        DeclareLaunchArgument("layer_file", default_value="",
                              description="optional file layered over params_file, key by key"),
        DeclareLaunchArgument("law", default_value="", description="law overriding the files' law (empty: keep)"),
        DeclareLaunchArgument("urdf", default_value="",
                              description="URDF file handed to the node as robot_description (empty: keep the files')"),
        DeclareLaunchArgument("namespace", default_value="", description="namespace of the node and its topics"),
        DeclareLaunchArgument("use_sim_time", default_value="false", choices=["true", "false"],
                              description="run on /clock (lock-step simulation)"),
        DeclareLaunchArgument("auto_activate", default_value="false", choices=["true", "false"],
                              description="configure and activate at once (keep false on hardware)"),
        OpaqueFunction(function=_controller),
    ])
