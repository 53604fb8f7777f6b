"""The robot closed loop (controller.RobotController on dynamics.elastic_chain.ElasticChain).

References:

* the bench closed loop (simulate.simulate with controller.JointController on the numba plant,
  itself checked against analytic results in test_bench_plant.py, test_laws.py and test_impact.py):
  the pendulum URDF with the bench knee's numbers must give the same trajectory and commands,
  safety filter included, for every law, through the end-stop impact;
* the design notes' safety rule for coupled robots (section 5): a fault on one joint puts the
  whole robot in safe mode;
* the slew contract |delta tau| <= rate * dt (design notes, section 5) and the bench controller's
  switching and ramps (test_controller.py checks them against hand-worked values): on the
  pendulum URDF the robot's switches and ramps must give the bench's commands.
"""
import dataclasses

import numpy as np
import pytest

pytest.importorskip("pinocchio", reason="URDF chains need Pinocchio (the pin package)")

from compliant_damping.io import config  # noqa: E402
from compliant_damping.control import controller
from compliant_damping.sim import scenarios, simulate
from compliant_damping.dynamics.elastic_chain import ElasticChain, ElasticElements  # noqa: E402
from compliant_damping.dynamics.urdf_chain import UrdfChain, bundled_urdf  # noqa: E402
from compliant_damping.control.laws import LAW_NAMES, ChainNominal, Gains  # noqa: E402
from compliant_damping.control.references import Step  # noqa: E402
from compliant_damping.sim.robot_sim import simulate_robot  # noqa: E402
from compliant_damping.control.safety import FaultCode, Limits  # noqa: E402
from compliant_damping.control.sample import JointSample, Reference  # noqa: E402

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
    run = simulate_robot(plant, robot, scenario, DURATION, DT, SIM.substeps)
    if law != "zero":
        assert np.max(bench.q) > SIM.joints[0].plant.stop_upper  # the impact is in the window
    err_q = np.max(np.abs(run.q - bench.q))
    err_tau = np.max(np.abs(run.tau_m - bench.tau_m))
    print(f"{law}: URDF robot vs bench joint: max |q| error {err_q:.1e} rad, max |tau| error {err_tau:.1e} N m")
    assert err_q < 1e-10 and err_tau < 1e-8
    assert run.faults == (None,) and bench.faults == (None,)


def test_a_fault_on_one_joint_puts_the_whole_robot_in_safe_mode():
    links = UrdfChain.from_file(bundled_urdf("two_link_arm.urdf"), ["shoulder", "elbow"])
    nominal = ChainNominal(links, np.array([0.2, 0.1]), np.array([400.0, 250.0]))
    gains = [Gains(motor_stiffness=300.0, motor_damping=8.0, link_damping=4.0, decoupling_stiffness=150.0)] * 2
    limits = [Limits(torque=40.0, torque_rate=1e4, deflection=0.1)] * 2
    robot = controller.RobotController("decoupled_damper", nominal, gains, limits, ["shoulder", "elbow"],
                                       "zero_torque", period=1e-3)
    ok = [JointSample(0.1, 0.0, 0.1, 0.0), JointSample(0.0, 0.0, 0.0, 0.0)]
    ref = Reference(np.array([0.1, 0.0]), np.zeros(2), np.zeros(2))
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


class Scripted:
    """A controller for the simulators that runs ``(time s, action(controller, t))`` pairs first."""

    def __init__(self, inner, actions):
        self.inner, self.actions, self.marks, self.ticks = inner, sorted(actions, key=lambda a: a[0]), [], 0

    def __getattr__(self, name):  # fault, faults, joint_names: the controller's own
        return getattr(self.inner, name)

    def step(self, s, ref, t, dt):
        while self.actions and self.actions[0][0] <= t + 1e-12:
            self.actions.pop(0)[1](self.inner, t)
            self.marks.append(self.ticks)
        self.ticks += 1
        return self.inner.step(s, ref, t, dt)


def _events(per_joint):
    """Law switches and a gain ramp while the joint moves into the end stop; gains as the caller wants them."""
    joint = CTRL.joints[0]
    softer = dataclasses.replace(joint.gains, motor_damping=6.0, link_damping=4.0, decoupling_stiffness=120.0,
                                 link_stiffness=30.0)
    wrap = (lambda g: [g]) if per_joint else (lambda g: g)
    return [(0.2, lambda c, t: c.switch_law("decoupled_damper")),
            (0.3, lambda c, t: c.set_gains(wrap(softer), t, 0.2)),
            (0.6, lambda c, t: c.switch_law("link_damping")),
            (0.75, lambda c, t: c.switch_law("decoupled_impedance", wrap(softer)))]


def test_robot_law_switches_and_gain_ramps_equal_the_bench_joints():
    scenario = scenarios.make("end_stop_impact", SIM.joints)
    joint = CTRL.joints[0]
    bench_ctrl = controller.JointController("motor_pd", joint.model, joint.gains, joint.limits, CTRL.safe_mode,
                                            period=DT)
    bench = simulate.simulate(SIM.joints, [Scripted(bench_ctrl, _events(False))], scenario, 1.0, control_dt=DT,
                              substeps=SIM.substeps)
    links = UrdfChain.from_file(bundled_urdf("pendulum.urdf"), ["knee"])
    nominal = ChainNominal(links, np.array([joint.model.motor_inertia]), np.array([joint.model.spring_stiffness]))
    robot = Scripted(controller.RobotController("motor_pd", nominal, [joint.gains], [joint.limits], ["knee"],
                                                CTRL.safe_mode, period=DT), _events(True))
    plant = ElasticChain(links, ElasticElements.from_joint_params([SIM.joints[0].plant]))
    run = simulate_robot(plant, robot, scenario, 1.0, DT, SIM.substeps)
    assert robot.marks == [200, 300, 600, 750] and run.faults == (None,) and bench.faults == (None,)
    assert np.max(np.abs(run.tau_m - bench.tau_m)) < 1e-8
    assert np.max(np.abs(run.q - bench.q)) < 1e-10


def test_coupled_robot_law_switch_while_moving_is_bumpless():
    links = UrdfChain.from_file(bundled_urdf("two_link_arm.urdf"), ["shoulder", "elbow"])
    nominal = ChainNominal(links, np.array([0.2, 0.1]), np.array([400.0, 250.0]))
    gains = [Gains(motor_stiffness=300.0, motor_damping=8.0, link_damping=4.0, decoupling_stiffness=150.0)] * 2
    limits = [Limits(torque=60.0, torque_rate=1e4, deflection=0.3)] * 2
    inner = controller.RobotController("motor_pd", nominal, gains, limits, ["shoulder", "elbow"], period=DT)
    switches = [(0.15, "decoupled_damper"), (0.3, "link_damping"), (0.45, "decoupled_impedance")]
    robot = Scripted(inner, [(t, lambda c, t, law=law: c.switch_law(law)) for t, law in switches])
    plant = ElasticChain(links, ElasticElements.lossless([0.2, 0.1], [400.0, 250.0]))
    q0 = np.array([0.4, -0.3])
    x0 = np.stack([q0, np.zeros(2), q0 + links.gravity(q0) / nominal.spring_stiffness, np.zeros(2)], axis=1)
    refs = [Step(0.4, 0.0, 0.05), Step(-0.3, 0.2, 0.05)]
    run = simulate_robot(plant, robot, scenarios.Scenario("switches", 0.6, x0, tuple(refs), np.zeros((0, 4))),
                         control_dt=DT)
    assert run.faults == (None, None)
    steps = np.abs(np.diff(run.tau_m, axis=0))
    assert np.max(steps) <= 1e4 * DT * (1 + 1e-12)  # the slew contract on every joint, every tick
    for k in robot.marks:
        assert np.min(np.abs(run.dq[k])) > 0.01, "both joints should be moving at the switch"
    k = robot.marks[0]  # motor_pd -> decoupled_damper: its states restart on the last commands
    assert np.max(np.abs(run.tau_m[k] - run.tau_m[k - 1])) < 1e-6
