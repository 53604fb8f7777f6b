"""Process faults across processes: a child killed (SIGKILL by PID) while the other one runs.

The bundled knee (config/one_joint.yaml) as two child processes in a namespace of their own
(``sys.executable -m compliant_damping.nodes...``, environment inherited, /clock and
/diagnostics remapped into the namespace); this process configures and activates the
controller through its lifecycle services, sets a link reference of 0.3 rad (so the motor holds
the gravity torque, about 0.6 N m) and records ``joint_states``, ``motor_effort`` and the
namespaced ``diagnostics`` with a probe node. Each run is bounded: about 2 s of loop before the
kill, at most 5 s after it.

Checks against the design notes' safety contract (section 5) and the nodes' documented
behaviour:

1. joint killed, real time: the controller's first safe-mode command comes within
   watchdog_timeout + 2 control periods of the last joint-state stamp, the torque ramps to zero
   while safe commands keep coming, and /diagnostics shows mode "safe" with a fault.
   (+ 10 ms, see SCHEDULING). Lock step: the controller reports a stopped sim clock within 5 s of
   wall time after the joint, and with it /clock, stops.
2. controller killed, real time: the joint applies zero torque within command_timeout + 2 state
   periods (+ 10 ms, see TRANSPORT) of the last command's stamp, and keeps it at zero.
3. every recorded motor_effort command is finite, within the torque limit and within the slew
   limit per stamp time (command_properties.check_commands).
"""
import os
import time
from dataclasses import dataclass, field

import pytest

rclpy = pytest.importorskip("rclpy", reason="cross-process tests need rclpy")
from diagnostic_msgs.msg import DiagnosticArray  # noqa: E402
from rclpy.qos import QoSProfile, ReliabilityPolicy  # noqa: E402
from sensor_msgs.msg import JointState  # noqa: E402

from command_properties import Command, check_commands  # noqa: E402
from compliant_damping.io import config  # noqa: E402
from compliant_damping import demo
from compliant_damping.nodes import scenario_player as player  # noqa: E402
from lifecycle_msgs.msg import Transition  # noqa: E402

pytestmark = pytest.mark.ros

CTRL, SIM = config.load(config.bundled())
# Both children tick at RATE, not the bundled 1 kHz: three busy Python processes (joint,
# controller, probe) at 1 kHz oversubscribe a 2-core machine, and a process that is not scheduled
# for a few hundred ms (seen: 0.7 to 0.9 s) is a test of the machine, not of the safety behaviour.
# At 200 Hz they idle most of the time; the watchdog timeout (50 ms) stays above two periods.
RATE = 200.0                               # Hz, control and joint-state rate of these runs
PERIOD = 1.0 / RATE                        # s, controller tick
STATE_PERIOD = 1.0 / RATE                  # s, simulated joint period
PERIOD_NS = round(1e9 * STATE_PERIOD)
LIMITS = {j.command: j.limits for j in CTRL.joints}
JOINT, MOTOR = CTRL.joints[0].link_state, CTRL.joints[0].motor_state
TARGET = 0.3            # rad, held link reference
BEFORE_KILL = 2.0       # s of wall time the loop runs before the kill
# Stamps measure from the state a command answered, not from its arrival at the joint: allow two
# loopback hops (state to controller, command to joint) and the joint's timer jitter on a shared
# 2-core machine (common practice margin, not a measured bound).
TRANSPORT = 0.010       # s
CATCH_UP = 10.0         # s of wall time the probe may record beyond ``after`` to see what it waits for
# The controller's steady-clock timer fires when the OS runs its process: on a loaded 2-core machine
# that can be a few ms late (common practice margin, not a measured bound). The exact bound,
# timeout + 2 periods, is checked deterministically in sim time (test_nodes_safety.py).
SCHEDULING = 0.010      # s
# A command answering the last joint state may still be on its way when the joint is killed.
IN_FLIGHT = 0.005       # s
DEEP_BEST_EFFORT = QoSProfile(depth=1000, reliability=ReliabilityPolicy.BEST_EFFORT)


@dataclass
class Record:
    """What the probe saw; stamps in s, ``wall`` = time.monotonic() at arrival."""

    states: list = field(default_factory=list)       # (stamp, applied motor torque N m)
    state_ns: list = field(default_factory=list)     # integer stamps (ns) of the states
    commands: list = field(default_factory=list)     # Command
    command_ns: list = field(default_factory=list)   # integer stamps (ns) of the commands
    command_wall: list = field(default_factory=list)  # arrival per command
    diagnostics: list = field(default_factory=list)  # (wall, mode, fault) of the first joint
    killed_at: float = 0.0                           # monotonic s of the SIGKILL


def _stamp_ns(msg) -> int:
    return msg.header.stamp.sec * 1_000_000_000 + msg.header.stamp.nanosec


class Probe:
    def __init__(self, node, rec: Record):
        self.rec = rec
        self.base_ns = None
        # best effort as the joint publishes in real time, but deep: a busy probe loses no state
        node.create_subscription(JointState, "joint_states", self._on_state, DEEP_BEST_EFFORT)
        node.create_subscription(JointState, "motor_effort", self._on_command, QoSProfile(depth=1000))
        node.create_subscription(DiagnosticArray, "diagnostics", self._on_diag, 10)

    def _relative(self, msg) -> float:
        """Stamp (s) counted from the first stamp this probe saw: seconds since 1970 as a float
        resolve only 0.24 us, too coarse to check a slew budget of 20 N m in 2 ms exactly."""
        if self.base_ns is None:
            self.base_ns = _stamp_ns(msg)
        return (_stamp_ns(msg) - self.base_ns) * 1e-9

    def _on_state(self, msg):
        if MOTOR in msg.name:
            self.rec.states.append((self._relative(msg), msg.effort[list(msg.name).index(MOTOR)]))
            self.rec.state_ns.append(_stamp_ns(msg))

    def _on_command(self, msg):
        self.rec.commands.append(Command(self._relative(msg), dict(zip(msg.name, msg.effort))))
        self.rec.command_wall.append(time.monotonic())
        self.rec.command_ns.append(_stamp_ns(msg))

    def _on_diag(self, msg):
        values = {kv.key: kv.value for kv in msg.status[0].values}
        self.rec.diagnostics.append((time.monotonic(), values.get("mode"), values.get("fault")))


def run(tmp_path, kill: str, lock_step: bool, after: float, enough=None) -> Record:
    """Start both children, activate, hold TARGET, SIGKILL ``kill`` after BEFORE_KILL s, record ``after`` s,
    then on until ``enough(rec)`` holds (at most CATCH_UP s more: a process of the loaded machine, the
    probe or the surviving child, may not be scheduled for a while)."""
    ns = f"/cdamp_fault_{os.getpid()}_{kill}_{int(lock_step)}"
    params = demo.namespaced_file(config.bundled(), ns, tmp_path / "params.yaml")
    ros_args = ["--ros-args", "-r", f"__ns:={ns}", "-r", f"/clock:={ns}/clock", "-r", f"/diagnostics:={ns}/diagnostics",
                "--params-file", str(params)]
    flag = "true" if lock_step else "false"
    commands = {"simulated_joint": demo.module("simulated_joint_node", *ros_args, "-p", f"lock_step:={flag}",
                                               "-p", f"state_rate:={RATE}"),
                "controller": demo.module("controller_node", *ros_args, "-p", f"use_sim_time:={flag}",
                                          "-p", f"control_rate:={RATE}")}
    procs, rec = {}, Record()
    try:
        demo.start(commands, tmp_path / "run", procs)
        rclpy.init()
        try:
            node = rclpy.create_node("fault_probe", namespace=ns)
            Probe(node, rec)
            reference = node.create_publisher(JointState, "link_reference", QoSProfile(depth=10))
            deadline = time.monotonic() + 30.0
            for step in (Transition.TRANSITION_CONFIGURE, Transition.TRANSITION_ACTIVATE):
                assert player.transition(node, step, deadline), f"lifecycle transition {step} failed; logs in {tmp_path}"
            assert player.spin_until(node, lambda: reference.get_subscription_count() > 0, deadline)
            reference.publish(JointState(name=[JOINT], position=[TARGET], velocity=[0.0]))  # stamp 0: at once
            # the probe must see the loop first: its best-effort reader of joint_states can take
            # seconds to be matched on a busy machine (seen: none for 3 s, while commands flowed)
            seen = player.spin_until(node, lambda: len(rec.states) >= 20 and len(rec.commands) >= 20, deadline)
            assert seen, f"the probe saw {len(rec.states)} states, {len(rec.commands)} commands; logs in {tmp_path}"
            player.spin_until(node, lambda: False, time.monotonic() + BEFORE_KILL)
            assert len(rec.commands) > 100, f"the loop did not run before the kill; logs in {tmp_path}"
            procs[kill].kill()  # SIGKILL by PID
            rec.killed_at = time.monotonic()
            procs[kill].wait()
            player.spin_until(node, lambda: False, rec.killed_at + after)
            if enough is not None:
                player.spin_until(node, lambda: enough(rec), time.monotonic() + CATCH_UP)
            node.destroy_node()
        finally:
            rclpy.shutdown()
    finally:
        for proc in procs.values():
            demo.stop(proc, 5.0)
    return rec


def _split(rec: Record):
    """(stamp s of the last command answering a joint state, safe-mode commands after it).

    A command answering a joint state carries that state's stamp, on the joint's period grid
    (the first command answers the first state, so it gives the grid); a watchdog command is
    stamped with the controller's clock, off the grid. Safe-mode commands are off the grid and
    arrive after the SIGKILL (plus IN_FLIGHT). Needs no joint state seen by this probe: under 1 kHz
    of commands a single-threaded probe may take few of the best-effort joint states, and its
    backlog can delay commands past the kill, which is why the grid decides, not arrival alone.
    """
    assert rec.command_ns, "the probe saw no command"
    on_grid = [(ns - rec.command_ns[0]) % PERIOD_NS == 0 for ns in rec.command_ns]
    last = max(c.stamp for c, g in zip(rec.commands, on_grid) if g)
    safe = [c for c, wall, g in zip(rec.commands, rec.command_wall, on_grid)
            if wall > rec.killed_at + IN_FLIGHT and not g and c.stamp > last]
    return last, safe


@pytest.fixture(scope="module")
def joint_killed(tmp_path_factory):
    command = CTRL.joints[0].command
    # recorded until the probe holds a zero command and a safe-mode diagnostic after the kill
    return run(tmp_path_factory.mktemp("joint_killed"), "simulated_joint", lock_step=False, after=1.5,
               enough=lambda rec: rec.commands[-1].efforts[command] == 0.0 and any(
                   wall > rec.killed_at and mode == "safe" and fault for wall, mode, fault in rec.diagnostics))


@pytest.fixture(scope="module")
def controller_killed(tmp_path_factory):
    # recorded until the probe holds joint states stamped 0.5 s past the last command: in one CI run
    # the probe saw none in the 1 s after the kill, so it could not see the zero torque
    return run(tmp_path_factory.mktemp("controller_killed"), "controller", lock_step=False, after=1.0,
               enough=lambda rec: rec.states[-1][0] > rec.commands[-1].stamp + 0.5)


def test_joint_killed_in_real_time_controller_enters_safe_mode(joint_killed):
    rec = joint_killed
    last_state, safe = _split(rec)
    assert safe, "no safe-mode command after the joint died"
    reaction = safe[0].stamp - last_state
    bound = CTRL.watchdog_timeout + 2 * PERIOD
    print(f"joint killed: first safe command {reaction * 1e3:.1f} ms after the last joint state "
          f"(bound {bound * 1e3:.1f} ms + {SCHEDULING * 1e3:.0f} ms scheduling), {len(safe)} safe commands")
    assert CTRL.watchdog_timeout <= reaction <= bound + SCHEDULING
    held = abs([c for c in rec.commands if c.stamp <= last_state][-1].efforts[CTRL.joints[0].command])
    assert held > 0.1  # the motor was holding the gravity torque before the kill (about 0.6 N m)
    assert len(safe) >= 2 and safe[-1].efforts[CTRL.joints[0].command] == 0.0  # ramped down, still publishing
    shown = [(wall - rec.killed_at, fault) for wall, mode, fault in rec.diagnostics
             if wall > rec.killed_at and mode == "safe" and fault]
    assert shown, f"/diagnostics never showed the fault: {rec.diagnostics[-3:]}"
    print(f"/diagnostics showed mode safe {shown[0][0]:.2f} s after the kill: {shown[0][1]}")


def test_joint_killed_in_lock_step_controller_reports_a_fault(tmp_path):
    """The sim clock stops with the joint: the steady-clock stall detector (watchdog.stall_timeout,
    2 s here) faults the controller, and the steady-clock diagnostics report it."""
    rec = run(tmp_path, "simulated_joint", lock_step=True, after=5.0)
    after_kill = [(wall - rec.killed_at, fault) for wall, _, fault in rec.diagnostics if wall > rec.killed_at and fault]
    assert after_kill, "no fault reported within 5 s of wall time after the simulated joint (and /clock) stopped"
    print(f"lock step, joint killed: fault shown {after_kill[0][0]:.2f} s after the kill: {after_kill[0][1]}")
    assert "sim time stood still" in after_kill[0][1]


def test_controller_killed_joint_applies_zero_torque(controller_killed):
    """No state stamped later than the command timeout (+ 2 periods + TRANSPORT) after the last
    command applies a torque, and zero torque does come. The first zero is printed; it can come
    late when the joint's own process is not scheduled for a while (then it publishes no state in
    between, and the first one after the pause already applies zero: seen once or twice in ten
    loaded runs, 0.7 to 0.9 s), which is why the check is on every late state, not on the first."""
    rec = controller_killed
    last_command = max(c.stamp for c in rec.commands)
    later = [(s, tau) for s, tau in rec.states if s > last_command]
    zero = [s for s, tau in later if tau == 0.0]
    assert zero, f"the joint never applied zero torque; last states {later[-3:]}"
    bound = SIM.command_timeout + 2 * STATE_PERIOD
    stale = [(s - last_command, tau) for s, tau in later if s > last_command + bound + TRANSPORT and tau != 0.0]
    print(f"controller killed: zero torque {(zero[0] - last_command) * 1e3:.1f} ms after the last command's stamp "
          f"(bound {bound * 1e3:.1f} ms + {TRANSPORT * 1e3:.0f} ms transport), {len(later)} states after it")
    assert not stale, f"a stale command was applied after its timeout: {stale[:3]}"
    assert all(tau == 0.0 for s, tau in later if s >= zero[0])  # and it stays at zero
    before = [abs(tau) for s, tau in rec.states if s <= last_command]
    assert before and max(before) > 0.1, "no state before the kill showed the held torque"  # about 0.6 N m


@pytest.mark.parametrize("case", ["joint_killed", "controller_killed"])
def test_every_command_keeps_the_safety_properties(case, request):
    rec = request.getfixturevalue(case)
    assert len(rec.commands) > 100
    assert check_commands(rec.commands, LIMITS, PERIOD) == []
