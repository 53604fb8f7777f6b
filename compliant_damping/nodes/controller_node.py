"""``damping_controller``: managed (lifecycle) node around one controller (controller.build): the
built-in joints' controller.JointBank, or a controller.RobotController for a URDF robot.

Topics (relative names):

* ``joint_states`` in (sensor_msgs/JointState; best effort, keep last 1: the newest sample
  is kept and older ones are dropped, so a storm cannot build up latency). Drops are counted
  from the gaps in DDS sequence numbers: the reception numbers where the middleware gives them,
  else the publication numbers (Fast DDS), which assumes one publisher (the driver). Every new stamp is one control tick; its stamp is the
  tick's time (arrival time when unstamped). A message repeating the stamp already answered
  gets the same command again (a lock-step joint resends its state when no answer came); a
  stamp older than the last answered, or more than ``watchdog_timeout`` ahead of the node
  clock, is rejected and counted.
* ``link_reference`` in (sensor_msgs/JointState: position rad, velocity rad/s per joint name;
  reliable, keep last 1000). ``header.stamp`` is when it takes effect (zero: at once), so a
  scenario can be streamed ahead. Positions outside the position limits are clipped to them;
  a speed beyond the link speed limit refuses the message (reference_schedule.ReferenceSchedule,
  counted in diagnostics). A sample is held until the next: its acceleration and higher
  derivatives are zero. Without a reference, and after every reset, the reference holds the
  link position measured on the first tick.
* ``link_trajectory`` in (trajectory_msgs/JointTrajectory; reliable, keep last 10): a motion
  for the joints it names, the rest-to-rest spline through its points' positions at
  ``header.stamp + time_from_start`` (zero stamp: from arrival), continuous to the fourth
  derivative, so the tracking laws feed its dynamics forward (trajectory_codec). It takes
  over from the first point's time; a spline faster than the link speed limit, or points that
  carry velocities, accelerations or efforts, refuse the message (counted like refused
  samples); positions beyond the position limits are clipped at each tick and counted. A link
  speed limit tightened at run time drops the queued samples and motions beyond it (counted).
  Decoding runs in the executor, between ticks: 5.4 ms for 211 points (measured), so send a
  trajectory ahead of its first point.
* ``motor_effort`` out (sensor_msgs/JointState: command names, effort N m; header.stamp = the
  stamp of the joint state answered; reliable, keep last 1000 so a slow recorder loses nothing),
  ``motor_effort_array`` (std_msgs/Float64MultiArray in joint_names order, with array_output),
  ``/diagnostics`` (2 Hz of steady time, so they go on when a sim clock stops; one status per
  joint: mode, fault code and reason, counters). On a URDF robot a fault on one joint puts every
  joint in safe mode: that joint's status gives its own code and reason, the others
  ``other_joint`` with a reason naming it.

Services (std_srvs/Trigger): ``~/stop`` (safe mode now), ``~/reset_fault`` (refuses with the
reason: not active, no fresh joint state, or the fault that stays).

Safety behaviour (the filter itself is safety.SafetyFilter):

* The slew limit counts stamp time (per joint, made monotonic), not messages.
* Watchdog (watchdog.Watchdog): armed by the first joint state after activation, it trips
  after ``watchdog_timeout`` without a new stamp; its timer runs on the steady clock in real
  time (a jump of the system clock cannot delay it) and on sim time with ``use_sim_time``.
  With sim time a stopped ``/clock`` is caught on the steady clock (watchdog.ClockStall,
  after watchdog.stall_timeout). Activation without joint states is reported after
  WAITING_REPORT s; nothing is commanded until the first one.
* A second publisher on ``motor_effort`` refuses activation, and trips every joint when it
  appears later (checked every SUPERVISE_PERIOD s of steady time).
* Deactivation and shutdown ramp the torque to zero at the slew limit (stamps continue the
  last answered one, so a lock-step joint applies the ramp), publish the zero, then go quiet.
  Limits refuse a torque/torque_rate above safety.MAX_RAMP_DOWN, which bounds the ramp.
* Every fault, refused change and burst of rejected messages is logged once with its reason.

Parameters: parameter_keys.parameter_specs. At run time ``law``, ``<joint>.gains.*``, ``<joint>.limits.*``,
``watchdog_timeout`` and ``gain_ramp_time`` may change (the whole set is validated by
config.controller_setup; gains ramp in over gain_ramp_time, a law switch is bumpless); the rest
changes only while unconfigured. Limits and the watchdog timeout only tighten at run time:
raising one needs an unconfigured node. Deletes are refused. ``lock_gains: true`` refuses law
and gain changes. A URDF robot comes from ``robot_description`` (the URDF string, the ROS
convention) or ``nominal_urdf`` (a file); the URDF gives the links, the per-joint keys the drive,
gains and limits.
"""
from __future__ import annotations

import math
import sys
import time

from builtin_interfaces.msg import Time
from diagnostic_msgs.msg import DiagnosticArray
from rclpy.clock import Clock, ClockType
from rclpy.lifecycle import Node as LifecycleNode
from rclpy.lifecycle import TransitionCallbackReturn
from rclpy.publisher import Publisher
from rclpy.qos import HistoryPolicy, QoSProfile, ReliabilityPolicy
from rclpy.service import Service
from rclpy.subscription import Subscription
from rclpy.timer import Timer
from sensor_msgs.msg import JointState
from std_msgs.msg import Float64MultiArray
from std_srvs.srv import Trigger
from trajectory_msgs.msg import JointTrajectory

from compliant_damping.control import controller, safety
from compliant_damping.control.sample import Reference, stack_references
from compliant_damping.control.watchdog import ClockStall, Watchdog, stall_timeout
from compliant_damping.io import config
from compliant_damping.io import joint_state_codec as codec
from compliant_damping.io.reference_schedule import ReferenceSchedule
from compliant_damping.io.runtime_changes import runtime_refusal
from compliant_damping.nodes import params, spin, startup
from compliant_damping.nodes.diagnostics import joint_statuses
from compliant_damping.nodes.messages import nanoseconds, time_msg
from compliant_damping.nodes.topics import NO_PUB_EVENTS, NO_SUB_EVENTS

WAITING_REPORT = 1.0     # s of steady time active without a joint state before it is reported
SUPERVISE_PERIOD = 0.25  # s of steady time between checks of the clock, the command topic and the logs
BURST_GAP = 1.0          # s without rejections that ends a burst of rejected messages
NEWEST_ONLY = QoSProfile(history=HistoryPolicy.KEEP_LAST, depth=1, reliability=ReliabilityPolicy.BEST_EFFORT)
UNSUPPORTED_SEQUENCE = 2 ** 64 - 1  # rmw's RMW_MESSAGE_INFO_SEQUENCE_NUMBER_UNSUPPORTED
TRAJECTORY_EXTRAS = ("velocities", "accelerations", "effort")  # point fields a trajectory must leave empty


class ControllerNode(LifecycleNode):
    def __init__(self, own_process: bool = False, **kwargs):
        """``own_process``: the node is its process's only one (spin.run): it freezes the heap once
        set up (startup.freeze_heap). Tests running many nodes in one process leave it off: what
        was frozen is never collected, so their torn-down nodes would stay alive."""
        super().__init__(config.CONTROLLER_NODE, **params.NODE_OPTIONS, **kwargs)
        self._own_process = own_process
        self._keys = params.declare(self, config.CONTROLLER_NODE)
        self.setup = self.bank = None
        self.active = False
        self._entities = []
        self._steady = Clock(clock_type=ClockType.STEADY_TIME)
        self.add_on_set_parameters_callback(self._on_set_parameters)

    # --- lifecycle -------------------------------------------------------------------------
    def on_configure(self, state):
        try:
            self.setup = s = params.setup(self, config.CONTROLLER_NODE, self._keys)
        except config.ConfigError as err:
            self.get_logger().error(f"cannot configure: {err}")
            return TransitionCallbackReturn.FAILURE
        self.bank = controller.build(s)
        self.decoder = codec.StateDecoder(s.joints, s.spring_torque_source == "effort")
        self.ticks = codec.TickClock(1.0 / s.control_rate)
        self.refs = ReferenceSchedule(s.joint_names, [j.limits for j in s.joints])
        self.stamps = codec.StampOrder(s.watchdog_timeout)
        self.sim_time = self.get_parameter("use_sim_time").value
        self._epoch_ns = self.get_clock().now().nanoseconds  # stamp times count from here (float precision)
        self._watch_clock = self.get_clock() if self.sim_time else self._steady
        self.watchdog = Watchdog(s.watchdog_timeout)
        self.stall = ClockStall(stall_timeout(s.watchdog_timeout))
        self.stamp_rejected = self.dropped = 0
        self._last_rejection_time = -math.inf
        self._last_rejection = None
        self._sequence = None
        self._logged = [None] * len(s.joints)
        self._last_command = None
        self._command = JointState(name=[j.command for j in s.joints])
        self._pub = self.create_publisher(JointState, "motor_effort", 1000, **NO_PUB_EVENTS)
        self._pub_array = (self.create_publisher(Float64MultiArray, "motor_effort_array", 10, **NO_PUB_EVENTS)
                           if s.array_output else None)
        self._pub_diag = self.create_publisher(DiagnosticArray, "/diagnostics", 10, **NO_PUB_EVENTS)
        self._watchdog_period = s.watchdog_timeout
        self._watchdog_timer = self.create_timer(s.watchdog_timeout, self._on_watchdog, clock=self._watch_clock)
        self._entities = [self._watchdog_timer, self._pub, self._pub_array, self._pub_diag,
                          self.create_subscription(JointState, "joint_states", self._on_state, NEWEST_ONLY,
                                                   **NO_SUB_EVENTS),
                          self.create_subscription(JointState, "link_reference", self._on_reference,
                                                   QoSProfile(depth=1000), **NO_SUB_EVENTS),
                          self.create_subscription(JointTrajectory, "link_trajectory", self._on_trajectory,
                                                   QoSProfile(depth=10), **NO_SUB_EVENTS),
                          self.create_timer(0.5, self._on_diagnostics, clock=self._steady),
                          self.create_timer(SUPERVISE_PERIOD, self._on_supervise, clock=self._steady),
                          self.create_service(Trigger, "~/stop", self._on_stop),
                          self.create_service(Trigger, "~/reset_fault", self._on_reset)]
        startup.log_start(self, s.joint_names, s.law)
        if self._own_process:
            startup.freeze_heap()
        return TransitionCallbackReturn.SUCCESS

    def on_activate(self, state):
        others = self.count_publishers(self._pub.topic_name) - 1
        if others > 0:
            self.get_logger().error(f"activation refused: {others} other publisher(s) on {self._pub.topic_name}")
            return TransitionCallbackReturn.FAILURE
        self.bank.restart_law()  # out of fault: from the measured state, bumpless from the last command
        self.ticks = codec.TickClock(self.ticks.period)
        self._hold = [None] * len(self.setup.joints)
        self.watchdog.disarm()  # armed by the first joint state
        self.stall.reset()
        self._activated_at, self._waiting_reported = self._steady_now(), False
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
        """Command the safe state: torque ramps to zero at the slew limit, zero is published, then silence.

        Stamps continue one period at a time from the last command's; the ramp takes at most
        safety.MAX_RAMP_DOWN s (the limits guarantee it reaches zero by then).
        """
        if not self.active:
            return
        self.active = False
        period = self.ticks.period
        t = self._newest_command_time()
        for _ in range(math.ceil(safety.MAX_RAMP_DOWN / period) + 1):
            t += period
            taus = self.bank.ramp_down(t)
            self._publish(taus, self._stamp_of(t))
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
    def _on_state(self, msg, info):
        if not self.active:
            return
        self._count_dropped(info)
        now = self._now()
        stamp = nanoseconds(msg.header.stamp)
        t = self._time(stamp) if stamp else now
        kind = self.stamps.classify(t, now)
        if kind is codec.Stamp.REPEATED:
            if self._last_command is not None:
                self._publish(self._last_command, msg.header.stamp)
            self.watchdog.repeated()
            return
        if kind is not codec.Stamp.NEW:
            self.stamp_rejected += 1
            self._rejected("joint state", self.stamps.rejection(kind, t, now))
            return
        samples = self.decoder.decode(msg.name, msg.position, msg.velocity, msg.effort)
        if isinstance(samples, codec.Rejection):
            self._rejected("joint state", samples)
            return
        self.stamps.accept(t)
        dt = self.ticks.interval(t)
        refs = [self._reference(j, s, r) for j, (s, r) in enumerate(zip(samples, self.refs.at(t)))]
        taus = self.bank.step(samples, stack_references(refs), t, dt)
        self._publish(taus, msg.header.stamp if stamp else self._stamp_of(t))
        self.watchdog.fresh(self._watch_now())
        self._feed_watchdog(self.setup.watchdog_timeout)
        self._log_faults()

    def _count_dropped(self, info):
        """Count the samples DDS dropped (keep last 1) since the previous one, from sequence numbers."""
        sequence = info.get("reception_sequence_number")
        if sequence is None or sequence == UNSUPPORTED_SEQUENCE:
            sequence = info.get("publication_sequence_number")
        if sequence is None or sequence == UNSUPPORTED_SEQUENCE:
            return
        if self._sequence is not None and sequence > self._sequence + 1:
            self.dropped += sequence - self._sequence - 1
        self._sequence = sequence

    def _rejected(self, what: str, rejection: codec.Rejection):
        """Count a rejected message; log the first of a burst with its reason."""
        if what == "joint state":
            self.watchdog.rejected(rejection)
            self._last_rejection = rejection
        now = self._steady_now()
        if now - self._last_rejection_time > BURST_GAP:
            self.get_logger().warning(f"{what} rejected: {rejection.reason} (further rejections are counted "
                                      f"in /diagnostics until {BURST_GAP} s without one)")
        self._last_rejection_time = now

    def _reference(self, j, sample, ref):
        if ref is not None:
            return ref
        if self._hold[j] is None:
            self._hold[j] = Reference(sample.q)
        return self._hold[j]

    def _on_reference(self, msg):
        rejection = self.refs.add(self._time(nanoseconds(msg.header.stamp)), msg.name, msg.position, msg.velocity)
        if rejection is not None:
            self._rejected("link reference", rejection)

    def _on_trajectory(self, msg):
        base = nanoseconds(msg.header.stamp) or self.get_clock().now().nanoseconds
        filled = sorted({f for p in msg.points for f in TRAJECTORY_EXTRAS if len(getattr(p, f))})
        times = [self._time(base + nanoseconds(p.time_from_start)) for p in msg.points]
        rejection = self.refs.add_trajectory(msg.joint_names, times, [list(p.positions) for p in msg.points], filled)
        if rejection is not None:
            self._rejected("link trajectory", rejection)

    def _on_watchdog(self):
        """Fires after watchdog_timeout without a new joint state (the timer restarts on each);
        then every control period (trip, ramp the torque down) until joint states come back."""
        if not self.active or not self.watchdog.armed:
            return
        self._check_watchdog()
        self._feed_watchdog(self.ticks.period)

    def _check_watchdog(self):
        """Trip every joint and step the torque down when the watchdog has expired."""
        fault = self.watchdog.expired(self._watch_now())
        if fault is not None:
            self.bank.trip(fault)
            t = max(self._now(), self._newest_command_time() + self.ticks.period)
            self._publish(self.bank.ramp_down(t), self._stamp_of(t))
            self._log_faults()

    def _on_supervise(self):
        """Steady-clock checks: a stopped sim clock, activation without joint states, a second
        publisher on the command topic; logs new faults."""
        if not self.active:
            return
        if self.watchdog.armed:
            self._check_watchdog()  # also here: a sim-time timer may not fire when /clock stops or jumps back
        steady = self._steady_now()
        fault = self.stall.expired(self._now(), steady) if self.sim_time and self.watchdog.armed else None
        if not self.watchdog.armed and not self._waiting_reported and steady - self._activated_at > WAITING_REPORT:
            self._waiting_reported = True
            self.get_logger().warning(f"active for {steady - self._activated_at:.1f} s without a joint state on "
                                      f"{self.resolve_topic_name('joint_states')}: nothing is commanded")
        others = self.count_publishers(self._pub.topic_name) - 1
        if others > 0:
            fault = safety.Fault(safety.FaultCode.COMMAND_CONFLICT,
                                 f"{others} other publisher(s) on {self._pub.topic_name}")
        if fault is not None:
            self.bank.trip(fault)
        self._log_faults()

    def _log_faults(self):
        faults = self.bank.faults
        for name, fault, logged in zip(self.setup.joint_names, faults, self._logged):
            if fault is not None and fault is not logged:
                self.get_logger().error(f"{name}: safe mode ({self.setup.safe_mode}): {fault}")
        self._logged = faults

    def _feed_watchdog(self, period: float):
        """Restart the watchdog timer with ``period`` (s): idle between joint states, no polling."""
        if period != self._watchdog_period:
            self._watchdog_timer.timer_period_ns = round(period * 1e9)
            self._watchdog_period = period
        self._watchdog_timer.reset()

    def _on_diagnostics(self):
        waiting = self.active and not self.watchdog.armed
        mode = "waiting for joint states" if waiting else "active" if self.active else "inactive"
        rejection, issue = self._last_rejection, self.refs.last_issue
        counters = {"tick_rate_hz": f"{self.ticks.rate():.1f}", "late_ticks": str(self.ticks.late),
                    "rejected_messages": str(self.decoder.rejected + self.stamp_rejected),
                    "dropped_messages": str(self.dropped), "last_rejection": rejection.reason if rejection else "",
                    "reference_rejected": str(self.refs.rejected), "reference_clipped": str(self.refs.clipped),
                    "last_reference_issue": issue.reason if issue else ""}
        msg = DiagnosticArray(status=joint_statuses(self.get_name(), self.setup.joint_names, self.bank.faults,
                                                    self.bank.law_name, mode, waiting, counters))
        msg.header.stamp = self.get_clock().now().to_msg()
        self._pub_diag.publish(msg)

    def _on_stop(self, request, response):
        self.bank.stop("stop requested (~/stop)")
        self._log_faults()
        response.success, response.message = True, "safe mode"
        return response

    def _on_reset(self, request, response):
        if not self.active:
            reasons = ["not active"]
        elif not self.watchdog.armed or self._watch_now() - self.watchdog.last_new > self.setup.watchdog_timeout:
            reasons = [f"{name}: no fresh joint state" for name in self.setup.joint_names]
        else:
            reasons = [str(staying) for staying in self.bank.reset()]
            if any(fault is None for fault in self.bank.faults):
                self.refs.clear()  # a reset law holds the measured position, never an old reference
                self._hold = [None] * len(self.setup.joints)
        response.success = not reasons
        response.message = "; ".join(reasons) or "fault cleared"
        if reasons:
            self.get_logger().warning(f"reset refused: {response.message}")
        else:
            self.get_logger().info("fault cleared; the law restarts holding the measured position")
        self._logged = self.bank.faults
        return response

    def _on_set_parameters(self, changes):
        return params.answer(self, config.CONTROLLER_NODE, changes, self._refusal)

    def _refusal(self, changes) -> str | None:
        """Why ``changes`` cannot be applied, or None after applying them."""
        robot = params.robot_changes(self, config.CONTROLLER_NODE, self._keys, changes)
        if robot is not None:
            return robot
        try:
            setup = params.setup(self, config.CONTROLLER_NODE, self._keys, changes)
        except config.ConfigError as err:
            return str(err)
        if self.bank is None:
            return None  # read again on configure
        refusal = runtime_refusal(self.setup, setup, params.changed(self, self._keys, changes))
        if refusal is not None:
            return refusal.reason
        self._apply(setup)
        return None

    def _apply(self, setup):
        gains, limits = [j.gains for j in setup.joints], [j.limits for j in setup.joints]
        if setup.law != self.setup.law:
            self.bank.switch_law(setup.law, gains)
        elif gains != [j.gains for j in self.setup.joints]:
            self.bank.set_gains(gains, self._now(), setup.gain_ramp_time)
        if limits != [j.limits for j in self.setup.joints]:
            self.bank.set_limits(limits)
        for dropped in self.refs.set_limits(limits):
            self._rejected("link reference", dropped)
        self.watchdog.timeout = self.stamps.ahead_tolerance = setup.watchdog_timeout
        self.stall.timeout = stall_timeout(setup.watchdog_timeout)
        self.setup = setup

    # --- helpers ---------------------------------------------------------------------------
    def _time(self, ns: int) -> float:
        """Stamp time (s) of a stamp or clock reading ``ns``, counted from the configure time, so a
        float resolves it to far below a microsecond (seconds since 1970 resolve only 0.24 us)."""
        return (ns - self._epoch_ns) * 1e-9

    def _stamp_of(self, t: float) -> Time:
        """The message stamp of stamp time ``t`` (s)."""
        return time_msg(self._epoch_ns + round(t * 1e9))

    @property
    def last_answered_ns(self) -> int | None:
        """Stamp (ns) of the last joint state answered, or None."""
        return None if self.stamps.last is None else self._epoch_ns + round(self.stamps.last * 1e9)

    def _now(self) -> float:
        """Node clock as stamp time (s): sim time with use_sim_time, else system time."""
        return self._time(self.get_clock().now().nanoseconds)

    def _watch_now(self) -> float:
        """Watchdog clock (s): sim time with use_sim_time, else the steady clock."""
        return self._watch_clock.now().nanoseconds * 1e-9

    def _steady_now(self) -> float:
        return self._steady.now().nanoseconds * 1e-9

    def _newest_command_time(self) -> float:
        """Stamp time (s) of the newest command, or the node clock before the first."""
        t = self.bank.last_command_time
        return self._now() if t is None else t

    def _publish(self, taus, stamp):
        """Publish the commands ``taus`` (N m, joint order) stamped ``stamp`` (one message, reused:
        publishing serialises it at once)."""
        msg = self._command
        msg.effort = [float(t) for t in taus]
        msg.header.stamp = stamp
        self._pub.publish(msg)
        if self._pub_array is not None:
            self._pub_array.publish(Float64MultiArray(data=msg.effort))
        self._last_command = list(taus)


def main(args=None) -> int:
    return spin.run(ControllerNode, args, on_exit=ControllerNode.go_quiet)


if __name__ == "__main__":
    sys.exit(main())
