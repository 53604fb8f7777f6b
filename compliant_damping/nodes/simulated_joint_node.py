"""``simulated_joint``: the joints of the ``simulated_joint`` parameter section, stepped with
plant.Plant: the built-in bench joints (bench_plant.advance, the offline simulator's code) or a URDF
robot (``robot_urdf`` or ``robot_description``: dynamics.elastic_chain.ElasticChain with the
section's floor, the offline robot simulator's plant), with substeps and sensors.SensorChannel.

Topics (relative names):

* ``joint_states`` out: per joint the link entry ``<joint>`` (q, q', effort = spring torque) and
  the motor entry ``<joint>_motor`` (theta, theta', effort = motor torque applied over the last period).
* ``motor_effort`` in (sensor_msgs/JointState): torque (N m) by command name ``<joint>_motor``.
  A joint without a command newer than command_timeout gets zero torque.
* ``external_torque`` in (sensor_msgs/JointState): effort = constant external link torque (N m)
  per joint name, from header.stamp (zero or past: at once) until the next message for that
  joint; publish 0.0 to remove it. This is the torque step.
* ``external_impulse`` in (sensor_msgs/JointState): effort = angular impulse (N m s) per joint
  name, delivered as a rectangular pulse over one state period from header.stamp (or at once).
* ``/clock`` out (rosgraph_msgs/Clock) in lock-step mode.

Parameters: parameter_keys.parameter_specs. The plant keys change at run time, validated by
config.sim_setup, e.g. ``ros2 param set /simulated_joint knee.stop_upper 0.5``: per joint every field
of its plant parameters (bench_plant.JointParams for a bench joint, bench_plant.DriveParams for a
URDF robot's, whose links the URDF gives), ``<joint>.stop_lower`` and ``<joint>.stop_upper`` moving
the end stops; on a URDF robot with a floor (``contact.frame``) also ``contact.height`` (m, finite),
which moves the floor from the next period on (plant.Plant.set_floor_height). The rest is fixed.
A refused change keeps the old value and says why. A URDF that does not parse or lacks a joint of
``joint_names`` refuses the start, naming its key (config.sim_setup; the executable exits 2).

Modes:

* real time (``lock_step: false``): a timer at state_rate advances the plant to the node clock
  (whole periods; a late tick catches up, up to MAX_CATCH_UP periods) and publishes the newest
  state, stamped with the plant's time; sensor-data QoS (best effort, keep last 5). With
  ``hold_until_commanded`` (the default) the robot rests at its start state, as on a stand, until
  the first ``motor_effort`` command: its state goes out every period with fresh stamps and plant
  time starts then (without it a URDF leg falls while the controller comes up).
* lock step (``lock_step: true``): sim time starts at 0; the first state and /clock go out at
  start; each ``motor_effort`` whose header.stamp equals the last state's stamp advances exactly
  one period (other commands are ignored) and /clock and the new state go out. Reliable QoS,
  keep last 1000, so a slower recorder loses nothing.
  When no such command comes for 0.2 s of wall time, the last state is sent again with its
  stamp unchanged, so a late-starting or late-activated controller picks the loop up.
"""
from __future__ import annotations

import math
import sys
from dataclasses import fields

from rclpy.clock import Clock, ClockType
from rclpy.node import Node
from rclpy.qos import QoSProfile, qos_profile_sensor_data
from rosgraph_msgs.msg import Clock as ClockMsg
from sensor_msgs.msg import JointState

from compliant_damping.io import config
from compliant_damping.io import joint_state_codec as codec
from compliant_damping.nodes import params, spin, startup
from compliant_damping.nodes.messages import nanoseconds, time_msg
from compliant_damping.nodes.topics import NO_PUB_EVENTS, NO_SUB_EVENTS
from compliant_damping.sim.plant import Plant

REPEAT_AFTER = 0.2  # s of wall time without an answering command before the state is sent again
MAX_CATCH_UP = 20  # periods a late real-time tick may advance at once
FLOOR_HEIGHT = "contact.height"  # the floor's run-time key


class SimulatedJointNode(Node):
    def __init__(self, own_process: bool = False, **kwargs):
        """``own_process``: the node is its process's only one (spin.run): it freezes the heap once
        set up (startup.freeze_heap). Tests running many nodes in one process leave it off: what
        was frozen is never collected, so their torn-down nodes would stay alive."""
        super().__init__(config.SIM_NODE, **params.NODE_OPTIONS, **kwargs)
        self._own_process = own_process
        self._keys = params.declare(self, config.SIM_NODE)
        self.setup = params.setup(self, config.SIM_NODE, self._keys)
        self.plant = Plant(self.setup)
        names = self.setup.joint_names
        self._commands = [f"{n}_motor" for n in names]
        self._latest = [(0.0, -math.inf)] * len(names)  # (torque N m, arrival s) per joint
        self._plant_keys = {f"{j.name}.{f.name}" for j in self.setup.joints for f in fields(j.plant)}
        if self.setup.contact is not None:
            self._plant_keys.add(FLOOR_HEIGHT)
        self._period_ns = round(1e9 * self.plant.period)
        lock = self.setup.lock_step
        qos = QoSProfile(depth=1000) if lock else qos_profile_sensor_data  # deep: recorders may lag
        self._pub = self.create_publisher(JointState, "joint_states", qos, **NO_PUB_EVENTS)
        self.create_subscription(JointState, "motor_effort", self._on_command, qos, **NO_SUB_EVENTS)
        self.create_subscription(JointState, "external_torque", self._on_external_torque, 10, **NO_SUB_EVENTS)
        self.create_subscription(JointState, "external_impulse", self._on_external_impulse, 10, **NO_SUB_EVENTS)
        self.add_on_set_parameters_callback(self._on_set_parameters)
        if lock:
            self._clock_pub = self.create_publisher(ClockMsg, "/clock", 10, **NO_PUB_EVENTS)
            self._moved = True
            self.create_timer(REPEAT_AFTER, self._on_repeat, clock=Clock(clock_type=ClockType.STEADY_TIME))
            self._publish()
        else:
            self._start_ns = self.get_clock().now().nanoseconds  # plant time 0 on the node clock
            self._held = self.setup.hold_until_commanded
            self.create_timer(self.plant.period, self._on_tick)
        startup.log_start(self, names)
        if self._own_process:
            startup.freeze_heap()

    def _state_time(self) -> float:
        """Time of the last published state (s): sim time in lock step, the node clock otherwise."""
        return self.plant.t if self.setup.lock_step else self.get_clock().now().nanoseconds * 1e-9

    def _on_command(self, msg):
        taus = codec.pick_values(msg.name, msg.effort, self._commands)
        if isinstance(taus, codec.Rejection):
            self.get_logger().warning(f"motor effort rejected: {taus.reason}", throttle_duration_sec=1.0)
            return
        if self.setup.lock_step:
            if nanoseconds(msg.header.stamp) == self.plant.ticks * self._period_ns:
                self.plant.advance([0.0 if t is None else t for t in taus])
                self._moved = True
                self._publish()
            return
        now = self._state_time()
        self._latest = [old if t is None else (t, now) for t, old in zip(taus, self._latest)]
        self._held = self._held and all(t is None for t in taus)  # the first command for a joint of ours

    def _on_tick(self):
        """Advance the plant to the node clock in whole periods, then publish the newest state.

        A late timer (a busy machine) costs joint-state messages, not physics: the plant keeps
        real time. A backlog beyond MAX_CATCH_UP periods (a stalled process) is dropped.
        """
        due = (self.get_clock().now().nanoseconds - self._start_ns) // self._period_ns - self.plant.ticks
        if self._held and due > 0:  # on the stand: time goes on, the plant does not
            self._start_ns += due * self._period_ns
            self._publish()
            return
        if due > MAX_CATCH_UP:
            self._start_ns += (due - MAX_CATCH_UP) * self._period_ns
            due = MAX_CATCH_UP
        if due <= 0:
            return
        now, timeout = self._state_time(), self.setup.command_timeout
        torques = [tau if now - t <= timeout else 0.0 for tau, t in self._latest]
        for _ in range(due):
            self.plant.advance(torques)
        self._publish()

    def _on_repeat(self):
        if not self._moved:
            self._publish()
        self._moved = False

    def _external(self, msg, apply):
        values = codec.pick_values(msg.name, msg.effort, self.setup.joint_names)
        if isinstance(values, codec.Rejection):
            self.get_logger().warning(f"external torque rejected: {values.reason}")
            return
        stamp, now = nanoseconds(msg.header.stamp) * 1e-9, self._state_time()
        start = max(stamp, now) if self.setup.lock_step else self.plant.t + max(stamp - now, 0.0)
        for j, v in enumerate(values):
            if v is not None:
                apply(j, v, start)

    def _on_external_torque(self, msg):
        self._external(msg, self.plant.hold_torque)

    def _on_external_impulse(self, msg):
        self._external(msg, self.plant.add_impulse)

    def _on_set_parameters(self, changes):
        return params.answer(self, config.SIM_NODE, changes, self._refusal)

    def _refusal(self, changes) -> str | None:
        """Why ``changes`` cannot be applied (deletes, fixed keys, invalid values), or None after applying them."""
        fixed = sorted(set(params.changed(self, self._keys, changes)) - self._plant_keys)
        if fixed:
            return f"{fixed[0]}: fixed after start; only plant parameters change at run time"
        try:
            setup = params.setup(self, config.SIM_NODE, self._keys, changes)
        except config.ConfigError as err:
            return str(err)
        self.plant.set_joints(setup.joints)
        if setup.contact is not None and setup.contact.height != self.plant.floor.height:
            self.plant.set_floor_height(setup.contact.height)
        self.setup = setup
        return None

    def _publish(self):
        if self.setup.lock_step:
            ns = self.plant.ticks * self._period_ns
            stamp = time_msg(ns)
            self._clock_pub.publish(ClockMsg(clock=stamp))
        else:  # the plant's time on the node clock
            ns = self._start_ns + self.plant.ticks * self._period_ns
            stamp = time_msg(ns)
        name, pos, vel, eff = codec.encode_states(self.setup.joint_names, self.plant.readings, self.plant.applied)
        msg = JointState(name=name, position=pos, velocity=vel, effort=eff)
        msg.header.stamp = stamp
        self._pub.publish(msg)


def main(args=None) -> int:
    return spin.run(SimulatedJointNode, args)


if __name__ == "__main__":
    sys.exit(main())
