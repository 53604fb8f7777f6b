"""The robot closed loop (controller.RobotController on dynamics.elastic_chain.ElasticChain).

References:

* the bench closed loop (simulate.simulate with controller.JointController on the numba plant,
  itself checked against analytic results in test_model.py, test_laws.py and test_impact.py):
  the pendulum URDF with the bench knee's numbers must give the same trajectory and commands,
  safety filter included, for every law, through the end-stop impact;
* the design notes' safety rule for coupled robots (section 5): a fault on one joint puts the
  whole robot in safe mode.
"""
import dataclasses

import numpy as np
import pytest

pytest.importorskip("pinocchio", reason="URDF chains need Pinocchio (the pin package)")

from compliant_damping import config, controller, scenarios, simulate  # noqa: E402
from compliant_damping.dynamics.elastic_chain import ElasticChain, ElasticElements  # noqa: E402
from compliant_damping.dynamics.urdf_chain import UrdfChain, bundled_urdf  # noqa: E402
from compliant_damping.laws import LAW_NAMES, ChainNominal, Gains  # noqa: E402
from compliant_damping.robot_sim import simulate_robot  # noqa: E402
from compliant_damping.safety import FaultCode, Limits  # noqa: E402
from compliant_damping.sample import JointSample  # noqa: E402

CTRL, SIM = config.load(config.bundled())
DT = 1.0 / CTRL.control_rate
DURATION = 1.2  # s: through the end-stop impact of the bundled scenario (about 0.85 s)


@pytest.mark.parametrize("law", LAW_NAMES)
def test_pendulum_urdf_robot_equals_the_bench_joint(law):
    ctrl = dataclasses.replace(CTRL, law=law)
    scenario = scenarios.make("end_stop_impact", SIM.joints)
    bench = simulate.simulate(SIM.joints, controller.bank(ctrl), scenario, DURATION, control_dt=DT,
                              substeps=SIM.substeps)
    joint = ctrl.joints[0]
    links = UrdfChain.from_file(bundled_urdf("pendulum.urdf"), ["knee"])
    nominal = ChainNominal(links, np.array([joint.model.motor_inertia]), np.array([joint.model.spring_stiffness]))
    robot = controller.RobotController(law, nominal, [joint.gains], [joint.limits], ["knee"], ctrl.safe_mode,
                                       period=DT)
    plant = ElasticChain(links, ElasticElements.from_joint_params([SIM.joints[0].plant]))
    run = simulate_robot(plant, robot, scenario.references, scenario.initial, DURATION, DT, SIM.substeps)
    if law != "zero":
        assert np.max(bench.q) > SIM.joints[0].plant.stop_upper  # the impact is in the window
    err_q = np.max(np.abs(run.q - bench.q))
    err_tau = np.max(np.abs(run.tau_m - bench.tau_m))
    print(f"{law}: URDF robot vs bench joint: max |q| error {err_q:.1e} rad, max |tau| error {err_tau:.1e} N m")
    assert err_q < 1e-10 and err_tau < 1e-8
    assert run.faults == [None] and bench.faults == [None]


def test_a_fault_on_one_joint_puts_the_whole_robot_in_safe_mode():
    links = UrdfChain.from_file(bundled_urdf("two_link_arm.urdf"), ["shoulder", "elbow"])
    nominal = ChainNominal(links, np.array([0.2, 0.1]), np.array([400.0, 250.0]))
    gains = [Gains(motor_stiffness=300.0, motor_damping=8.0, link_damping=4.0, decoupling_stiffness=150.0)] * 2
    limits = [Limits(torque=40.0, torque_rate=1e4, deflection=0.1)] * 2
    robot = controller.RobotController("decoupled_damper", nominal, gains, limits, ["shoulder", "elbow"],
                                       "zero_torque", period=1e-3)
    ok = [JointSample(0.1, 0.0, 0.1, 0.0), JointSample(0.0, 0.0, 0.0, 0.0)]
    ref = (np.array([0.1, 0.0]), np.zeros(2), np.zeros(2))
    for k in range(5):
        robot.step(ok, ref, 1e-3 * k, 1e-3)
    assert robot.faults == [None, None]
    bent = [ok[0], JointSample(0.0, 0.0, 0.2, 0.0)]  # the elbow's spring beyond its 0.1 rad limit
    robot.step(bent, ref, 0.005, 1e-3)
    shoulder, elbow = robot.faults
    assert elbow.code is FaultCode.DEFLECTION
    assert shoulder.code is FaultCode.OTHER_JOINT and shoulder.reason.startswith("elbow: deflection")
    assert robot.reset() and robot.faults[1] is not None  # refused while the elbow is still bent
    robot.step(ok, ref, 0.006, 1e-3)
    assert robot.reset() == [] and robot.faults == [None, None]
