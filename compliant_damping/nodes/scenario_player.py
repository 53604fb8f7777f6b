"""``scenario_player``: plays a bundled scenario's link reference to a running controller and
records the loop, for ``cdamp demo`` (compliant_damping.demo) and by hand.

It configures and activates ``damping_controller`` (lifecycle services), streams set points
on ``link_reference`` stamped with the sim time at which each sample applies, sends each
motion once on ``link_trajectory`` as the waypoints of scenarios.streamed (the offline
simulator given that scenario reproduces the run), and
records ``joint_states`` and ``motor_effort`` until the sim time reaches the scenario's
duration, deactivates the controller and writes the series to an ``.npz`` file:
``t, q, dq, theta, dtheta, tau_s`` (states, one row per tick, columns per joint) and
``t_cmd, tau_m`` (commands by the stamp of the state they answer), ``control_dt`` (s, the tick);
recordings.read_npz reads it back as a runs.Run. Meant for a lock-step
simulated joint; exits 1 when the run does not finish within ``--timeout`` s of wall time.

The player paces the loop, so the run does not depend on how the processes are scheduled.
The lock-step joint must take its commands from the player: start it with
``-r motor_effort:=paced_motor_effort`` (config.PACED_EFFORT). The player records each
``motor_effort`` command and relays it there only after it has published the reference up to
``--lead`` ticks past the tick that command leads to. So the loop can never get ahead of the
player: every reference sample goes out at least ``--lead`` round trips of the loop (joint,
controller, player) before the controller needs it, and the recorder cannot lose a state or a
command, since the joint advances only on what the player relays. (Before, the player only
published ``--lead`` ticks ahead of the newest state it had seen, while the joint and the
controller ran on without it: a player starved of CPU for longer than ``--lead`` ticks of the
loop let the controller use a stale reference.) What remains assumed is reliable in-order
delivery on ``link_reference`` within those ``--lead`` round trips. Waiting for the controller's
acknowledgement (``Publisher.wait_for_all_acked``) would make that certain too, but it was
tried and stalled: the acknowledgements came late (up to 1 s) or not at all.

    python -m compliant_damping.nodes.scenario_player --scenario end_stop_impact --out run.npz

Topics and the controller's services are relative to the node's namespace (``-r __ns:=...``).
"""
from __future__ import annotations

import argparse
import sys
import time

import numpy as np
import rclpy
import rclpy.utilities
from lifecycle_msgs.msg import Transition
from lifecycle_msgs.srv import ChangeState
from rclpy.qos import QoSProfile
from sensor_msgs.msg import JointState
from trajectory_msgs.msg import JointTrajectory

from compliant_damping.io import config
from compliant_damping.io import joint_state_codec as codec
from compliant_damping.nodes import messages
from compliant_damping.sim import scenarios


class ScenarioPlayer:
    """Reference publisher, recorder and pace-maker of one lock-step run.

    lead: reference samples published ahead of the loop (>= 1); ticks: run length (state periods).
    """

    def __init__(self, node, scenario, ctrl_setup, sim_setup, lead: int, ticks: int):
        if lead < 1:
            raise ValueError(f"lead: need at least 1 reference sample ahead (got {lead})")
        self.node, self.scenario, self.lead, self.ticks = node, scenarios.streamed(scenario), lead, ticks
        self.joints = ctrl_setup.joint_names
        self.commands = [j.command for j in ctrl_setup.joints]
        self.decoder = codec.StateDecoder(ctrl_setup.joints, spring_torque_from_effort=False)
        self.period_ns = round(1e9 / sim_setup.state_rate)
        self.states, self.efforts = {}, {}  # tick -> readings / torques
        self.sent = 0                       # reference ticks published so far
        qos = QoSProfile(depth=1000)
        self.reference = node.create_publisher(JointState, "link_reference", qos)
        self.trajectory = node.create_publisher(JointTrajectory, "link_trajectory", QoSProfile(depth=10))
        self.motions = {j: r for j, r in zip(self.joints, self.scenario.references) if not r.set_points}
        early = [j for j, r in self.motions.items() if r.times[0] <= 0.0]
        if early:
            raise ValueError(f"scenario: the motion of {', '.join(early)} starts at 0 s; a streamed motion starts "
                             "after the first tick (its stamp says when)")
        self.joint_input = node.create_publisher(JointState, config.PACED_EFFORT, qos)
        node.create_subscription(JointState, "joint_states", self._on_state, qos)
        node.create_subscription(JointState, "motor_effort", self._on_effort, qos)

    def publish_through(self, tick: int) -> None:
        """Publish reference samples up to ``tick + lead`` (never past the run's last tick, after which the last sample holds)."""
        if self.sent == 0:
            for joint, motion in self.motions.items():
                self.trajectory.publish(messages.trajectory_msg(joint, motion))
        last = min(tick + self.lead, self.ticks)
        while self.sent <= last:
            t = self.sent * self.period_ns * 1e-9
            # a moving joint's samples stop where its trajectory takes over
            held = [(j, r.sample(t)) for j, r in zip(self.joints, self.scenario.references)
                    if r.set_points or t < r.times[0]]
            if held:
                msg = JointState(name=[j for j, _ in held], position=[s.q for _, s in held],
                                 velocity=[s.dq for _, s in held])
                msg.header.stamp = messages.time_msg(self.sent * self.period_ns)
                self.reference.publish(msg)
            self.sent += 1

    def _on_state(self, msg):
        tick = round(messages.nanoseconds(msg.header.stamp) / self.period_ns)
        samples = self.decoder.decode(msg.name, msg.position, msg.velocity, msg.effort)
        if not isinstance(samples, codec.Rejection):
            tau_s = codec.pick_values(msg.name, msg.effort, self.joints)
            tau_s = [float("nan")] * len(self.joints) if isinstance(tau_s, codec.Rejection) else tau_s
            self.states[tick] = [(*s[:4], v) for s, v in zip(samples, tau_s)]

    def _on_effort(self, msg):
        """Record the command; publish the reference ahead of the tick it leads to, then relay it to the joint."""
        tick = round(messages.nanoseconds(msg.header.stamp) / self.period_ns)
        taus = codec.pick_values(msg.name, msg.effort, self.commands)
        if not isinstance(taus, codec.Rejection):
            self.efforts[tick] = taus
        self.publish_through(tick + 1)
        self.joint_input.publish(msg)

    def arrays(self, ticks: int) -> dict:
        """Recorded series over the first ``ticks`` ticks (all must be present)."""
        states = np.array([self.states[k] for k in range(ticks)], dtype=float)  # (ticks, joints, 5)
        cmd_ticks = sorted(k for k in self.efforts if k < ticks)
        out = {k: states[:, :, i] for i, k in enumerate(("q", "dq", "theta", "dtheta", "tau_s"))}
        out["t"] = np.arange(ticks) * self.period_ns * 1e-9
        out["t_cmd"] = np.array(cmd_ticks) * self.period_ns * 1e-9
        out["tau_m"] = np.array([self.efforts[k] for k in cmd_ticks], dtype=float).reshape(len(cmd_ticks), -1)
        out["control_dt"] = np.array(self.period_ns * 1e-9)
        return out


def spin_until(node, condition, deadline: float) -> bool:
    """Spin ``node`` until ``condition()`` holds (True) or the monotonic ``deadline`` passes (False)."""
    while not condition():
        if time.monotonic() > deadline:
            return False
        rclpy.spin_once(node, timeout_sec=0.01)
    return True


def transition(node, transition_id: int, deadline: float) -> bool:
    """Ask the controller in ``node``'s namespace for a lifecycle transition; True when it succeeded."""
    client = node.create_client(ChangeState, f"{node.get_namespace().rstrip('/')}/{config.CONTROLLER_NODE}/change_state")
    if not spin_until(node, client.service_is_ready, deadline):
        return False
    future = client.call_async(ChangeState.Request(transition=Transition(id=transition_id)))
    return spin_until(node, future.done, deadline) and future.result().success


def play(node, args) -> int:
    doc = config.read(args.config or config.bundled())
    ctrl_setup = config.controller_setup(config.node_parameters(doc, config.CONTROLLER_NODE))
    sim_setup = config.sim_setup(config.node_parameters(doc, config.SIM_NODE))
    scenario = scenarios.make(args.scenario, sim_setup.joints, links=sim_setup.links, floor=sim_setup.contact)
    ticks = round((args.duration or scenario.duration) * sim_setup.state_rate)
    log = node.get_logger()
    try:
        player = ScenarioPlayer(node, scenario, ctrl_setup, sim_setup, args.lead, ticks)
    except ValueError as err:
        log.error(f"cannot play {args.scenario} over ROS: {err}")
        return 2
    deadline = time.monotonic() + args.timeout
    if not transition(node, Transition.TRANSITION_CONFIGURE, deadline):
        log.error("could not configure the controller")
        return 1
    listening = lambda: min(player.reference.get_subscription_count(), player.trajectory.get_subscription_count()) > 0  # noqa: E731
    if not spin_until(node, listening, deadline):
        log.error("the controller does not listen on link_reference and link_trajectory")
        return 1
    heard = lambda: 0 in player.states and node.count_publishers("motor_effort") > 0  # noqa: E731
    if not spin_until(node, heard, deadline):  # the joint repeats its first state until answered
        log.error("no first joint state, or no controller publishing motor_effort")
        return 1
    player.publish_through(0)  # stamped samples wait in the controller until their time
    if not transition(node, Transition.TRANSITION_ACTIVATE, deadline):
        log.error("could not activate the controller")
        return 1
    done = lambda: all(k in player.states for k in range(ticks)) and max(player.efforts, default=-1) >= ticks - 1  # noqa: E731
    if not spin_until(node, done, deadline):
        log.error(f"run incomplete after {args.timeout} s: {len(player.states)} of {ticks} states")
        return 1
    np.savez(args.out, joint_names=np.array(ctrl_setup.joint_names), **player.arrays(ticks))
    transition(node, Transition.TRANSITION_DEACTIVATE, time.monotonic() + 5.0)  # safe state, loop at rest
    return 0


def main(argv=None) -> int:
    p = argparse.ArgumentParser(prog="scenario_player", description=__doc__.split("\n\n")[0])
    p.add_argument("--config", help="parameter file (default: bundled one_joint.yaml)")
    p.add_argument("--scenario", choices=scenarios.SCENARIOS, default="end_stop_impact")
    p.add_argument("--duration", type=float, help="s of sim time (default: the scenario's)")
    p.add_argument("--lead", type=int, default=200, help="reference ticks published ahead of the loop (>= 1)")
    p.add_argument("--timeout", type=float, default=60.0, help="s of wall time before giving up")
    p.add_argument("--out", required=True, help=".npz file to write")
    argv = sys.argv if argv is None else argv
    args = p.parse_args(rclpy.utilities.remove_ros_args(argv)[1:])
    rclpy.init(args=argv)
    node = None
    try:
        node = rclpy.create_node("scenario_player")
        return play(node, args)
    except KeyboardInterrupt:
        return 130
    finally:
        if node is not None:
            node.destroy_node()
        rclpy.try_shutdown()


if __name__ == "__main__":
    sys.exit(main())
