"""The controllers' one robot-wide interface (controller.build): JointBank for the built-in joints,
RobotController for a URDF robot.

References:

* the bench closed loop (simulate.simulate stepping each JointController on its own, checked
  against analytic results in test_bench_plant.py, test_laws.py and test_impact.py): the JointBank
  driven as a robot by the chain simulator (sim/robot_sim.py on the same independent joints) must
  give the same trajectory and commands to round-off (two integrators of the same equations);
* the design notes (section 5): a fault trips its own joint's filter; on a coupled robot it puts
  every joint in safe mode, while independent bench joints keep running.
"""
import numpy as np
import pytest

from compliant_damping.control import controller
from compliant_damping.control.safety import FaultCode
from compliant_damping.control.sample import JointSample, Reference
from compliant_damping.io import config
from compliant_damping.sim import scenarios, simulate
from compliant_damping.sim.robot_sim import robot_plant, simulate_robot

THREE_CTRL, THREE = config.load(config.bundled("three_joints.yaml"))
DT = 1.0 / THREE_CTRL.control_rate


def test_the_joint_bank_as_a_robot_equals_the_bench_stepped_joint_by_joint():
    scenario = scenarios.make("setpoint_step", THREE.joints)
    bench = simulate.simulate(THREE.joints, controller.bank(THREE_CTRL), scenario, 0.6, control_dt=DT,
                              substeps=THREE.substeps, seed=THREE.seed)
    joint_bank = controller.build(THREE_CTRL)
    assert isinstance(joint_bank, controller.JointBank) and len(joint_bank) == 3
    run = simulate_robot(robot_plant(THREE, scenario), joint_bank, scenario, 0.6, DT, THREE.substeps,
                         sensors=[j.sensor for j in THREE.joints], seed=THREE.seed)  # the file's noisy sensors
    err_q, err_tau = np.max(np.abs(run.q - bench.q)), np.max(np.abs(run.tau_m - bench.tau_m))
    print(f"JointBank through the chain simulator vs the bench: max |q| error {err_q:.1e} rad, "
          f"max |tau| error {err_tau:.1e} N m")
    assert np.max(np.abs(bench.q - bench.q[0])) > 0.01  # the step moved the joints
    assert err_q < 1e-10 and err_tau < 1e-8
    assert run.faults == bench.faults == (None,) * 3
    assert joint_bank.last_command_time == pytest.approx(0.6 - DT, abs=1e-12)


def _bent(readings, j, deflection):
    return [JointSample(s.q, s.dq, s.q + deflection, s.dtheta) if i == j else s for i, s in enumerate(readings)]


def test_a_bench_fault_stays_on_its_joint_and_reset_names_the_joints_that_stay():
    joint_bank = controller.build(THREE_CTRL)
    rest = [JointSample(0.0, 0.0, 0.0, 0.0)] * 3
    ref = Reference(np.zeros(3), np.zeros(3), np.zeros(3))
    assert joint_bank.last_command_time is None
    joint_bank.step(rest, ref, 0.0, DT)
    limit = THREE_CTRL.joints[1].limits.deflection
    joint_bank.step(_bent(rest, 1, 2.0 * limit), ref, DT, DT)
    hip, knee, ankle = joint_bank.faults
    assert hip is None and ankle is None and knee.code is FaultCode.DEFLECTION
    staying = joint_bank.reset()  # the knee's last reading is still bent
    assert [(s.joint, s.fault.code) for s in staying] == [("knee", FaultCode.DEFLECTION)]
    assert str(staying[0]).startswith("knee: deflection: spring deflection")
    joint_bank.step(rest, ref, 2 * DT, DT)
    assert joint_bank.reset() == [] and joint_bank.faults == [None] * 3
    assert joint_bank.last_command_time == 2 * DT


def test_the_builder_gives_a_urdf_robot_one_robot_controller():
    pytest.importorskip("pinocchio", reason="URDF robots need Pinocchio (the pin package)")
    leg, _ = config.load(config.bundled("compliant_leg.yaml"))
    robot = controller.build(leg)
    assert isinstance(robot, controller.RobotController) and robot.joint_names == leg.joint_names
    assert robot.last_command_time is None
    q = [-0.5, 1.0, -0.5]
    rest = [JointSample(x, 0.0, x, 0.0) for x in q]
    ref = Reference(np.array(q), np.zeros(3), np.zeros(3))
    robot.step(rest, ref, 0.0, 1e-3)
    robot.step(_bent(rest, 2, 2.0 * leg.joints[2].limits.deflection), ref, 1e-3, 1e-3)
    hip, knee, ankle = robot.faults
    assert ankle.code is FaultCode.DEFLECTION
    assert hip.code is knee.code is FaultCode.OTHER_JOINT and hip.reason.startswith("ankle_pitch: deflection")
    assert [s.joint for s in robot.reset()] == ["ankle_pitch"]
    assert robot.last_command_time == 1e-3


@pytest.mark.parametrize("field", range(5))
@pytest.mark.parametrize("value", [np.nan, np.inf, -np.inf])
def test_a_non_finite_entry_anywhere_in_a_robot_reference_puts_every_joint_in_safe_mode(field, value):
    """Design notes, section 5: a non-finite reference never reaches the law; on a coupled robot
    every joint goes to safe mode, the commands stay finite and within the torque limits."""
    pytest.importorskip("pinocchio", reason="URDF robots need Pinocchio (the pin package)")
    leg, _ = config.load(config.bundled("compliant_leg.yaml"))
    robot = controller.build(leg)
    q = np.array([-0.5, 1.0, -0.5])
    rest = [JointSample(x, 0.0, x, 0.0) for x in q]
    good = Reference(q, np.zeros(3), np.zeros(3))  # a robot's reference may leave the last derivatives scalar
    assert robot.step(rest, good, 0.0, 1e-3).tolist() and robot.faults == [None] * 3
    entries = [np.array(v, dtype=float) * np.ones(3) for v in good]
    entries[field][1] = value  # the knee's entry
    out = robot.step(rest, Reference(*entries), 1e-3, 1e-3)
    hip, knee, ankle = robot.faults
    assert hip.code is FaultCode.NON_FINITE_REFERENCE  # reported on the first joint: it is the robot's reference
    assert knee.code is ankle.code is FaultCode.OTHER_JOINT
    assert np.all(np.isfinite(out)) and np.all(np.abs(out) <= [j.limits.torque for j in leg.joints])
