"""``damping_controller``: managed (lifecycle) node around one controller.JointController per joint.

Topics (relative names):

* ``joint_states`` in (sensor_msgs/JointState; best effort, keep last 5, so it pairs with a
  real-time or a lock-step publisher). Every accepted message is one control tick; dt comes
  from successive header stamps (arrival times when unstamped), clamped (joint_state_codec).
  A message that repeats the stamp already answered gets the same command again.
* ``link_reference`` in (sensor_msgs/JointState: position rad, velocity rad/s per joint name;
  reliable, keep last 1000). ``header.stamp`` is when it takes effect (zero: at once), so a
  scenario can be streamed ahead. Without one, the reference holds the link position measured
  on the first tick after activation.
* ``motor_effort`` out (sensor_msgs/JointState: command names, effort N m; header.stamp = the
  stamp of the joint state answered; reliable, keep last 1000 so a slow recorder loses nothing),
  ``motor_effort_array`` (std_msgs/Float64MultiArray in joint_names order, with array_output), ``/diagnostics`` (2 Hz, one status per joint).

Services (std_srvs/Trigger): ``~/stop`` (safe mode now), ``~/reset_fault`` (refuses with the
reason: not active, no fresh joint state, or the safety filter's reason).

Lifecycle: configure builds everything from the parameters; activate arms the watchdog (a timer
on the node clock, so sim time in lock step, restarted by every accepted joint state: it fires
only after watchdog_timeout of silence, then at control_rate while the torque ramps down) and starts answering joint states;
deactivate and shutdown ramp the torque to zero at the slew limit (stamps continue the last
answered one, so a lock-step joint applies the ramp) and then publish nothing on motor_effort.
A fault survives deactivate/activate; only ``~/reset_fault`` clears it.

Parameters: config.parameter_specs. At run time ``law``, ``<joint>.gains.*``, ``<joint>.limits.*``,
``watchdog_timeout`` and ``gain_ramp_time`` may change (the whole set is validated by
config.controller_setup; gains ramp in over gain_ramp_time, a law switch is bumpless); the rest
changes only while unconfigured. ``lock_gains: true`` refuses law and gain changes.
"""
from __future__ import annotations

import re
import sys
import time

from builtin_interfaces.msg import Time
from diagnostic_msgs.msg import DiagnosticArray, DiagnosticStatus, KeyValue
from rclpy.lifecycle import Node as LifecycleNode
from rclpy.lifecycle import TransitionCallbackReturn
from rclpy.publisher import Publisher
from rclpy.qos import QoSProfile, qos_profile_sensor_data
from rclpy.service import Service
from rclpy.subscription import Subscription
from rclpy.timer import Timer
from sensor_msgs.msg import JointState
from std_msgs.msg import Float64MultiArray
from std_srvs.srv import Trigger

from .. import config, controller
from .. import joint_state_codec as codec
from . import params, spin, startup

RUNTIME_KEYS = re.compile(r"^(law|watchdog_timeout|gain_ramp_time|[^.]+\.(gains|limits)\.\w+)$")


def _ns(stamp) -> int:
    return stamp.sec * 1_000_000_000 + stamp.nanosec


def _stamp(ns: int) -> Time:
    return Time(sec=ns // 1_000_000_000, nanosec=ns % 1_000_000_000)


class ControllerNode(LifecycleNode):
    def __init__(self, **kwargs):
        super().__init__(config.CONTROLLER_NODE, **kwargs)
        self._keys = params.declare(self, config.CONTROLLER_NODE)
        self.setup = self.bank = None
        self.active = False
        self._entities = []
        self.add_on_set_parameters_callback(self._on_set_parameters)

    # --- lifecycle -------------------------------------------------------------------------
    def on_configure(self, state):
        try:
            self.setup = s = config.controller_setup(params.values(self, self._keys))
        except config.ConfigError as err:
            self.get_logger().error(f"cannot configure: {err}")
            return TransitionCallbackReturn.FAILURE
        self.bank = controller.bank(s)
        self.decoder = codec.StateDecoder(s.joints, s.spring_torque_source == "effort")
        self.ticks = codec.TickClock(1.0 / s.control_rate)
        self.refs = codec.ReferenceSchedule(s.joint_names)
        self._answered, self._last_command = 0, None
        self._pub = self.create_publisher(JointState, "motor_effort", 1000)
        self._pub_array = (self.create_publisher(Float64MultiArray, "motor_effort_array", 10)
                           if s.array_output else None)
        self._pub_diag = self.create_publisher(DiagnosticArray, "/diagnostics", 10)
        self._watchdog_period = s.watchdog_timeout
        self._watchdog = self.create_timer(s.watchdog_timeout, self._on_watchdog)
        self._entities = [self._watchdog, self._pub, self._pub_array, self._pub_diag,
                          self.create_subscription(JointState, "joint_states", self._on_state,
                                                   qos_profile_sensor_data),
                          self.create_subscription(JointState, "link_reference", self._on_reference,
                                                   QoSProfile(depth=1000)),
                          self.create_timer(0.5, self._on_diagnostics),
                          self.create_service(Trigger, "~/stop", self._on_stop),
                          self.create_service(Trigger, "~/reset_fault", self._on_reset)]
        startup.log_start(self, s.joint_names, s.law)
        return TransitionCallbackReturn.SUCCESS

    def on_activate(self, state):
        now = self._now()
        for c in self.bank:
            if c.fault is None:
                c.reset()  # the law restarts from the measured state, bumpless from the last command
            c.arm(now)
        self.ticks = codec.TickClock(self.ticks.period)
        self._hold = [None] * len(self.bank)
        self._feed_watchdog(self.setup.watchdog_timeout)
        self.active = True
        return TransitionCallbackReturn.SUCCESS

    def on_deactivate(self, state):
        self.go_quiet()
        return TransitionCallbackReturn.SUCCESS

    def on_cleanup(self, state):
        self._destroy()
        return TransitionCallbackReturn.SUCCESS

    def on_shutdown(self, state):
        self.go_quiet()
        self._destroy()
        return TransitionCallbackReturn.SUCCESS

    def go_quiet(self):
        """Command the safe state: torque ramps to zero at the slew limit (bounded by watchdog_timeout), then silence."""
        if not self.active:
            return
        self.active = False
        period = self.ticks.period
        for k in range(1, int(self.setup.watchdog_timeout / period) + 2):
            taus = [c.safety.ramp_down(period) for c in self.bank]
            self._publish(taus, _stamp(self._answered + round(k * period * 1e9)))
            if not any(taus):
                break
            time.sleep(period)

    def _destroy(self):
        kinds = ((Publisher, self.destroy_publisher), (Subscription, self.destroy_subscription),
                 (Timer, self.destroy_timer), (Service, self.destroy_service))
        for e in filter(None, self._entities):
            next(destroy for kind, destroy in kinds if isinstance(e, kind))(e)
        self._entities, self.bank, self.setup = [], None, None

    # --- callbacks -------------------------------------------------------------------------
    def _on_state(self, msg):
        if not self.active:
            return
        stamp = _ns(msg.header.stamp)
        if stamp and stamp == self._answered and self._last_command is not None:
            self._publish(self._last_command, msg.header.stamp)
            return
        samples = self.decoder.decode(msg.name, msg.position, msg.velocity, msg.effort)
        if isinstance(samples, str):
            self.get_logger().warning(f"joint state rejected: {samples}", throttle_duration_sec=1.0)
            return
        now = self._now()
        t = stamp * 1e-9 if stamp else now
        dt = self.ticks.interval(t)
        refs = self.refs.at(t)
        taus = [c.step(s, self._reference(j, s, refs[j]), now, dt)
                for j, (c, s) in enumerate(zip(self.bank, samples))]
        self._answered = stamp
        self._publish(taus, msg.header.stamp)
        self._feed_watchdog(self.setup.watchdog_timeout)

    def _reference(self, j, sample, ref):
        if ref is not None:
            return ref
        if self._hold[j] is None:
            self._hold[j] = (sample.q, 0.0, 0.0)
        return self._hold[j]

    def _on_reference(self, msg):
        reason = self.refs.add(_ns(msg.header.stamp) * 1e-9, msg.name, msg.position, msg.velocity)
        if reason:
            self.get_logger().warning(f"link reference rejected: {reason}", throttle_duration_sec=1.0)

    def _on_watchdog(self):
        """Fires only after watchdog_timeout without a joint state; then every control period
        (trip, ramp the torque down) until joint states come back."""
        if not self.active:
            return
        taus = [c.watchdog(self._now(), self.setup.watchdog_timeout, self.ticks.period) for c in self.bank]
        if any(t is not None for t in taus):
            self._publish([c.safety.last_torque if t is None else t for c, t in zip(self.bank, taus)],
                          self.get_clock().now().to_msg())
        self._feed_watchdog(self.ticks.period)

    def _feed_watchdog(self, period: float):
        """Restart the watchdog timer with ``period`` (s): idle between joint states, no polling."""
        if period != self._watchdog_period:
            self._watchdog.timer_period_ns = round(period * 1e9)
            self._watchdog_period = period
        self._watchdog.reset()

    def _on_diagnostics(self):
        mode = "active" if self.active else "inactive"
        rate = self.ticks.rate()
        msg = DiagnosticArray()
        msg.header.stamp = self.get_clock().now().to_msg()
        for j, c in zip(self.setup.joints, self.bank):
            values = {"law": c.law_name, "mode": "safe" if c.fault else mode, "fault": c.fault or "",
                      "tick_rate_hz": f"{rate:.1f}", "late_ticks": str(self.ticks.late),
                      "rejected_messages": str(self.decoder.rejected),
                      "last_rejection": self.decoder.last_reason or ""}
            msg.status.append(DiagnosticStatus(
                level=DiagnosticStatus.ERROR if c.fault else DiagnosticStatus.OK,
                name=f"{self.get_name()}: {j.name}", hardware_id=j.name,
                message=c.fault or f"{mode}, law {c.law_name}",
                values=[KeyValue(key=k, value=v) for k, v in values.items()]))
        self._pub_diag.publish(msg)

    def _on_stop(self, request, response):
        for c in self.bank:
            c.stop("stop requested (~/stop)")
        response.success, response.message = True, "safe mode"
        return response

    def _on_reset(self, request, response):
        reasons = ["not active"] if not self.active else [
            f"{j.name}: {r}" for j, r in zip(self.setup.joints, map(self._reset_one, self.bank)) if r]
        response.success = not reasons
        response.message = "; ".join(reasons) or "fault cleared"
        return response

    def _reset_one(self, c):
        if c.last_reading_time is None or self._now() - c.last_reading_time > self.setup.watchdog_timeout:
            return "no fresh joint state"
        return c.reset()

    def _on_set_parameters(self, changes):
        new = params.changed(self, self._keys, changes)
        if not new:
            return params.result(None)
        try:
            setup = config.controller_setup(params.values(self, self._keys, changes))
        except config.ConfigError as err:
            return params.result(str(err))
        if self.bank is None:
            return params.result(None)  # read again on configure
        fixed = sorted(k for k in new if not RUNTIME_KEYS.match(k))
        if fixed:
            return params.result(f"{fixed[0]}: changes only while unconfigured (cleanup, set, configure)")
        if self.setup.lock_gains and any(k == "law" or ".gains." in k for k in new):
            return params.result("lock_gains is true: law and gains are fixed at run time")
        self._apply(setup)
        return params.result(None)

    def _apply(self, setup):
        now = self._now()
        for c, old, j in zip(self.bank, self.setup.joints, setup.joints):
            if setup.law != self.setup.law:
                c.switch_law(setup.law, j.gains)
            elif j.gains != old.gains:
                c.set_gains(j.gains, now, setup.gain_ramp_time)
            if j.limits != old.limits:
                c.set_limits(j.limits)
        self.setup = setup

    # --- helpers ---------------------------------------------------------------------------
    def _now(self) -> float:
        return self.get_clock().now().nanoseconds * 1e-9

    def _publish(self, taus, stamp):
        msg = JointState(name=[j.command for j in self.setup.joints], effort=[float(t) for t in taus])
        msg.header.stamp = stamp
        self._pub.publish(msg)
        if self._pub_array is not None:
            self._pub_array.publish(Float64MultiArray(data=msg.effort))
        self._last_command = list(taus)


def main(args=None) -> int:
    return spin.run(ControllerNode, args, on_exit=ControllerNode.go_quiet)


if __name__ == "__main__":
    sys.exit(main())
