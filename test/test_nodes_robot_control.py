"""The controller node running a URDF robot (the bundled leg, config/compliant_leg.yaml) against the
simulated joint node on the same file, in lock step, in one process.

References:

* the offline robot simulator (robot_sim.simulate_robot with controller.robot of the file's
  controller section, checked against outside references in test_robot_sim.py,
  test_elastic_chain.py and test_leg_landing.py): the loop over ROS must follow it to round-off,
  as test_nodes_loop.py checks for the bench joint (the node counts time from stamps, the
  simulator from tick * period: round-off apart, the same inputs);
* the design notes' safety rule for coupled robots (section 5): a fault on one joint puts every
  joint in safe mode; /diagnostics (diagnostic_msgs, one status per joint) must say which joint
  and why.
"""
import numpy as np
import pytest
from diagnostic_msgs.msg import DiagnosticStatus
from rclpy.parameter import Parameter
from sensor_msgs.msg import JointState
from std_srvs.srv import Trigger

pytest.importorskip("pinocchio", reason="URDF robots need Pinocchio (the pin package)")

from compliant_damping.control import controller, laws  # noqa: E402
from compliant_damping.control.safety import FaultCode  # noqa: E402
from compliant_damping.io import config  # noqa: E402
from compliant_damping.nodes.controller_node import ControllerNode  # noqa: E402
from compliant_damping.nodes.simulated_joint_node import SimulatedJointNode  # noqa: E402
from compliant_damping.sim import scenarios  # noqa: E402
from compliant_damping.sim.robot_sim import robot_plant, simulate_robot  # noqa: E402
from node_harness import ros, seconds, stamp  # noqa: E402,F401 (ros is a fixture)

pytestmark = pytest.mark.ros

LEG_FILE = config.bundled("compliant_leg.yaml")
LEG_DOC = config.read(LEG_FILE)
LEG_CTRL, LEG = config.load(LEG_FILE)
PERIOD = 1.0 / LEG.state_rate
IMPULSE, IMPULSE_AT = 0.05, 0.2  # N m s on every link (the external_impulse scenario's time, s)


LAW_LAYERS = {"link_damping": [config.bundled("leg_laws/link_damping.yaml")]}  # its gains for the leg


def _controller_parameters(law: str | None = None) -> dict:
    """The leg's controller section, with ``law`` and its layer file (LAW_LAYERS) when given."""
    params = config.layered_parameters([LEG_FILE, *LAW_LAYERS.get(law, [])], config.CONTROLLER_NODE)
    return {**params, "law": law} if law else params


def _leg_loop(ros, law: str | None = None):
    """Configured controller (sim time; the file's law, or ``law``) and the simulated leg in lock
    step, both on the leg's file; the leg publishes its first state and waits for the controller's activation."""
    ctrl = ros.start(ControllerNode, {**_controller_parameters(law), "use_sim_time": True})
    assert ctrl.trigger_configure().name == "SUCCESS"
    assert isinstance(ctrl.bank, controller.RobotController)
    sim = ros.start(SimulatedJointNode, {**config.node_parameters(LEG_DOC, config.SIM_NODE), "lock_step": True})
    return ctrl, sim


def _link_positions(states, ticks: int) -> np.ndarray:
    """(ticks, n) link positions from recorded joint_states by tick (a repeated state shares its stamp)."""
    by_tick = {round(seconds(m.header.stamp) / PERIOD): m for m in states}
    link = [list(by_tick[0].name).index(n) for n in LEG.joint_names]
    return np.array([[by_tick[k].position[i] for i in link] for k in range(ticks)])


@pytest.mark.parametrize("law", laws.LAW_NAMES)
def test_the_controller_node_runs_the_leg_as_the_offline_robot_simulator(ros, law):
    """Every law: hold at the initial positions (the node holds the first measured ones, the
    scenario its initial ones: the same with the file's ideal sensors); an impulse hits every link
    at 0.2 s. The zero law holds nothing: the leg sags (0.57 rad at the knee by 0.35 s), over ROS as offline."""
    scenario = scenarios.make("external_impulse", LEG.joints, links=LEG.links, floor=LEG.contact,
                              impulse=IMPULSE, impulse_width=PERIOD)
    duration, ticks = 0.35, 350
    ctrl, sim = _leg_loop(ros, law)
    msg = JointState(name=LEG.joint_names, effort=[IMPULSE] * len(LEG.joints))
    msg.header.stamp = stamp(IMPULSE_AT)
    ros.publish_when_heard(ros.probe.impulse, msg)
    assert ros.spin_until(lambda: len(sim.plant.external) == len(LEG.joints), 5.0), "impulse not taken"
    assert np.array_equal(sim.plant.external, scenario.external)
    assert ctrl.trigger_activate().name == "SUCCESS"
    assert ros.spin_until(lambda: sim.plant.ticks >= ticks, 120.0), f"loop stalled at tick {sim.plant.ticks}"
    q_ros = _link_positions(ros.probe.states, ticks)

    law_ctrl = config.controller_setup(_controller_parameters(law))
    offline = simulate_robot(robot_plant(LEG, scenario), controller.robot(law_ctrl), scenario, duration, PERIOD,
                             LEG.substeps, sensors=[j.sensor for j in LEG.joints], seed=LEG.seed)
    moved = np.max(np.abs(offline.q - offline.q[0]), axis=0)
    err = np.max(np.abs(q_ros - offline.q))
    print(f"{law} on the leg over ROS vs offline: max |q| error {err:.1e} rad over {duration} s; "
          f"excursions {np.round(moved, 4)} rad; faults {offline.faults}")
    assert np.all(moved > 5e-4)  # every joint took its impulse (or sagged)
    assert tuple(ctrl.bank.faults) == offline.faults
    assert offline.faults == (None,) * 3
    assert err < 1e-9


def _statuses(diagnostics) -> dict:
    """{joint: (level, values)} of the newest /diagnostics message."""
    return {s.hardware_id: (s.level, {kv.key: kv.value for kv in s.values}) for s in diagnostics[-1].status}


def test_a_deflection_fault_on_one_leg_joint_puts_every_joint_in_safe_mode(ros):
    ctrl, sim = _leg_loop(ros)
    assert ctrl.trigger_activate().name == "SUCCESS"
    assert ros.spin_until(lambda: sim.plant.ticks >= 50, 30.0), "loop stalled"
    assert ctrl.bank.faults == [None] * 3
    knee = LEG.joint_names.index("knee_pitch")
    q, _, theta, _ = sim.plant.x[knee]
    deflection = abs(theta - q)  # rad: the spring holding the knee's gravity load
    assert deflection > 1e-3
    lowered = round(0.5 * deflection, 6)  # a tighter limit than the spring's deflection now
    assert ctrl.set_parameters([Parameter("knee_pitch.limits.deflection", value=lowered)])[0].successful
    assert ros.spin_until(lambda: all(ctrl.bank.faults), 5.0), "no fault"
    hip, knee_fault, ankle = ctrl.bank.faults
    assert knee_fault.code is FaultCode.DEFLECTION and f"beyond {lowered} rad" in knee_fault.reason
    for other in (hip, ankle):
        assert other.code is FaultCode.OTHER_JOINT and other.reason == f"knee_pitch: {knee_fault}"
    # reset is refused while the knee is beyond its limit. Checked at once: in safe mode (motor damping
    # only) the sagging leg's knee spring relaxes below the lowered limit within about a hundred ticks
    # (94 in one run). The service's callback is called directly, between ticks: a service round trip
    # would let the lock-step loop run on meanwhile.
    q, _, theta, _ = sim.plant.x[knee]
    assert abs(theta - q) > lowered  # the knee is still beyond its lowered limit
    refused = ctrl._on_reset(Trigger.Request(), Trigger.Response())
    assert not refused.success and refused.message.startswith("knee_pitch: deflection")
    assert all(ctrl.bank.faults)

    ros.probe.diagnostics.clear()
    assert ros.spin_until(lambda: ros.probe.diagnostics, 5.0), "no /diagnostics"
    shown = _statuses(ros.probe.diagnostics)
    print({name: (values["fault_code"], values["fault"]) for name, (_, values) in shown.items()})
    assert sorted(shown) == sorted(LEG.joint_names)
    assert all(level == DiagnosticStatus.ERROR and values["mode"] == "safe" for level, values in shown.values())
    assert shown["knee_pitch"][1]["fault_code"] == "deflection"
    assert shown["knee_pitch"][1]["fault"].startswith("spring deflection")
    for name in ("hip_pitch", "ankle_pitch"):
        assert shown[name][1]["fault_code"] == "other_joint"
        assert shown[name][1]["fault"].startswith("knee_pitch: deflection: spring deflection")

    # safe mode (motor_damping) goes on being commanded every tick, within each joint's torque limit
    faulted_at, tick = ctrl.last_answered_ns, sim.plant.ticks
    assert ros.spin_until(lambda: sim.plant.ticks >= tick + 30, 30.0), "loop stalled after the fault"
    after = [m for m in ros.probe.efforts if round(seconds(m.header.stamp) * 1e9) > faulted_at]
    limits = [j.limits for j in LEG_CTRL.joints]
    assert len(after) >= 20 and all(abs(e) <= lim.torque for m in after for e, lim in zip(m.effort, limits))
    assert all(ctrl.bank.faults)
