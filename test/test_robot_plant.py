"""plant.Plant on a URDF robot: the elastic chain with its floor, stepped one state period at a time.

References:

* the offline robot simulator (robot_sim.simulate_robot, itself checked against outside references
  in test_robot_sim.py, test_elastic_chain.py and test_leg_landing.py): the bundled leg stepped
  period by period under the same controller must follow its trajectory to 1e-12 rad, through
  the impulses of the external_impulse scenario (delivered with Plant.add_impulse) and through a
  floor raised into the foot (Plant.set_floor_height);
* the bench Plant (bench_plant.advance, checked against analytic results in test_bench_plant.py):
  the pendulum URDF twin of the bench knee (urdf/pendulum.urdf) must follow it to 1e-10 rad
  through an impulse, a held torque and an end stop moved onto the link (Plant.set_joints);
* the impulse-momentum theorem for a chain's generalized momentum p = M(q) q' (Lagrange's
  equations, e.g. Siciliano et al., Robotics: Modelling, Planning and Control, ch. 7):
  dp/dt = tau + 1/2 (q'^T dM/dq_i q')_i on free links without gravity, so a one-period pulse of
  impulse J on joint j changes p by J e_j plus that velocity term over the pulse.
"""
import dataclasses

import numpy as np
import pytest

pytest.importorskip("pinocchio", reason="URDF chains need Pinocchio (the pin package)")

from compliant_damping.control import controller  # noqa: E402
from compliant_damping.control.sample import Reference  # noqa: E402
from compliant_damping.dynamics.urdf_chain import UrdfChain, bundled_urdf  # noqa: E402
from compliant_damping.io import config  # noqa: E402
from compliant_damping.sim import scenarios  # noqa: E402
from compliant_damping.sim.plant import Plant  # noqa: E402
from compliant_damping.sim.robot_sim import robot_plant, scripted_torques, simulate_robot  # noqa: E402
from compliant_damping.sim.sensors import SensorParams  # noqa: E402

LEG_CTRL, LEG = config.load(config.bundled("compliant_leg.yaml"))
BENCH_CTRL, BENCH = config.load(config.bundled())


def _reference(scenario, t: float) -> Reference:
    """The scenario's references of every joint at ``t`` (s) as one Reference of arrays (as simulate_robot)."""
    return Reference(*(np.array(column) for column in zip(*(r.sample(t) for r in scenario.references))))


def _foot_height(plant) -> float:
    """Height of the contact frame above the URDF world's origin along the floor normal (m)."""
    return float(np.asarray(LEG.contact.normal) @ LEG.links.frame_position(LEG.contact.frame, plant.x[:, 0]))


NOISY = SensorParams(position_noise=1e-4, velocity_noise=1e-3, torque_noise=0.01, encoder_resolution=1e-5,
                     delay=1e-3)  # rad, rad/s, N m, rad, s: invented, of the order of a small drive's


@pytest.mark.parametrize("sensor", [None, NOISY], ids=["ideal", "noisy"])
def test_the_leg_stepped_period_by_period_follows_the_offline_simulator(sensor):
    setup = LEG if sensor is None else dataclasses.replace(
        LEG, joints=tuple(dataclasses.replace(j, sensor=sensor) for j in LEG.joints), seed=7)
    period = 1.0 / LEG.state_rate
    impulse = 0.05  # N m s on each link: the ankle stays within its 10 rad/s speed limit
    scenario = scenarios.make("external_impulse", LEG.joints, links=LEG.links, floor=LEG.contact,
                              impulse=impulse, impulse_width=period)
    duration = 0.5  # s: the impulses at 0.2 s and the leg's response
    reference = simulate_robot(robot_plant(setup, scenario), controller.robot(LEG_CTRL), scenario, duration,
                               period, setup.substeps, sensors=[j.sensor for j in setup.joints], seed=setup.seed)
    plant, robot = Plant(setup), controller.robot(LEG_CTRL)
    for j in scenario.acting:
        plant.add_impulse(j, impulse, 0.2)  # as the node's external_impulse topic gives it
    assert np.array_equal(plant.external, scenario.external)  # the same rows [joint, t_on, t_off, torque]
    states = []
    for _ in range(len(reference.t)):
        states.append(plant.x.copy())
        plant.advance(robot.step(plant.readings, _reference(scenario, plant.t), plant.t, period))
    q = np.array(states)[:, :, 0]
    moved = np.max(np.abs(reference.q - reference.q[0]), axis=0)
    err = np.max(np.abs(q - reference.q))
    print(f"leg ({'ideal' if sensor is None else 'noisy'} sensors), period by period vs offline: "
          f"max |q| error {err:.1e} rad; excursions {np.round(moved, 4)} rad; faults {reference.faults}")
    assert np.all(moved > 5e-4)  # every joint took its impulse (hip 0.9 mrad, ankle 32 mrad)
    assert err < 1e-12
    assert tuple(robot.faults) == reference.faults
    assert sensor is not None or reference.faults == (None,) * len(LEG.joints)


def test_the_pendulum_urdf_robot_steps_as_the_bench_joint():
    robot_setup = dataclasses.replace(BENCH, links=UrdfChain.from_file(bundled_urdf("pendulum.urdf"), ["knee"]))
    bench, robot = Plant(BENCH), Plant(robot_setup)
    laws = {id(bench): controller.bank(BENCH_CTRL)[0], id(robot): controller.bank(BENCH_CTRL)[0]}
    moved_stop = [dataclasses.replace(BENCH.joints[0], plant=dataclasses.replace(BENCH.joints[0].plant,
                                                                                stop_upper=0.01))]
    q0 = BENCH.joints[0].initial_position
    q = {id(bench): [], id(robot): []}
    for plant in (bench, robot):
        plant.add_impulse(0, 0.5, 0.1)         # N m s
        plant.hold_torque(0, 3.0, 0.3)         # N m, pushes the link up
        for k in range(800):
            if k == 500:
                plant.set_joints(moved_stop)   # the upper end stop moves onto the pushed link
            s = plant.readings[0]
            plant.advance([laws[id(plant)].step(s, Reference(q0), plant.t, plant.period)])
            q[id(plant)].append(plant.x[0, 0])
    q_bench, q_robot = np.array(q[id(bench)]), np.array(q[id(robot)])
    err = np.max(np.abs(q_robot - q_bench))
    print(f"pendulum URDF vs bench: max |q| error {err:.1e} rad; peak {q_bench.max():.4f} rad, "
          f"held {q_bench[499]:.4f} rad, against the moved stop {q_bench[-1]:.4f} rad")
    assert np.max(np.abs(q_bench[100:300] - q0)) > 0.01  # the impulse moved the link
    assert q_bench[499] > 0.015 and q_bench[-1] < q_bench[499] - 0.003  # the moved stop pushed it back
    assert err < 1e-10


def test_an_impulse_changes_the_generalized_momentum_by_the_impulse():
    names = LEG.joint_names
    free = [dataclasses.replace(j, plant=dataclasses.replace(j.plant, spring_stiffness=1e-9, spring_damping=0.0,
                                                             link_viscous=0.0)) for j in LEG.joints]
    links = UrdfChain.from_file(bundled_urdf("compliant_leg.urdf"), names, gravity=0.0)
    plant = Plant(dataclasses.replace(LEG, joints=tuple(free), links=links, contact=None))
    joint, impulse, period = 1, 0.05, plant.period  # the knee, N m s
    assert np.all(plant.x[:, 1] == 0.0)  # at rest: p = 0
    plant.add_impulse(joint, impulse, 0.0)
    plant.advance(np.zeros(len(names)))
    q, dq = plant.x[:, 0], plant.x[:, 1]
    p = links.mass_matrix(q) @ dq
    # 1/2 q'^T dM/dq_i q' over the pulse: q' grows linearly from 0, so its integral is T/3 times
    # the end value (dM/dq_i by central differences of Pinocchio's mass matrix).
    eps = 1e-6
    dm = [(links.mass_matrix(q + eps * e) - links.mass_matrix(q - eps * e)) / (2 * eps) for e in np.eye(len(q))]
    velocity_term = np.array([0.5 * dq @ d @ dq for d in dm]) * period / 3.0
    expected = impulse * np.eye(len(q))[joint] + velocity_term
    print(f"momentum change {p} N m s, expected {expected} (velocity term {velocity_term})")
    assert np.max(np.abs(velocity_term)) > 1e-6 * impulse  # the term is not negligible at this tolerance
    assert np.max(np.abs(p - expected)) < 1e-6 * impulse
    assert len(plant.external) == 0  # the pulse is over


def test_a_floor_raised_at_run_time_meets_the_foot():
    plant = Plant(LEG)
    hold = np.array([r.tau_s for r in plant.readings])  # motor torques that keep the leg at rest
    foot = _foot_height(plant)
    assert LEG.contact.height_at(0.0) < foot - 0.2  # the crouched foot is clear of the floor (0.213 m)
    for _ in range(50):
        plant.advance(hold)
    assert abs(_foot_height(plant) - foot) < 1e-9  # nothing touched it
    raised = foot + 0.003  # m: 3 mm into the foot
    plant.set_floor_height(raised)
    assert plant.floor.height_at(plant.t) == raised
    assert plant.floor.depth(LEG.links, plant.x[:, 0], plant.t) == pytest.approx(0.003, abs=1e-12)
    # the offline plant with a floor at that height from the same state
    chain = robot_plant(dataclasses.replace(LEG, contact=dataclasses.replace(LEG.contact, height=raised)))
    x, none = plant.x.copy(), scripted_torques(np.zeros((0, 4)), len(hold))
    err, heights = 0.0, []
    for _ in range(200):
        chain.advance(x, hold, none, plant.t, plant.period / plant.substeps, plant.substeps)
        plant.advance(hold)
        err = max(err, float(np.max(np.abs(plant.x - x))))
        heights.append(_foot_height(plant))
    print(f"floor raised to {raised:.4f} m: foot from {foot:.4f} m to {max(heights):.4f} m; "
          f"vs the offline plant: max state error {err:.1e}")
    assert max(heights) > raised  # the floor pushed the foot out of it and up
    assert err < 1e-12
    with pytest.raises(ValueError, match="contact.height"):
        plant.set_floor_height(float("nan"))


def test_a_robot_without_a_floor_refuses_a_floor_height():
    with pytest.raises(ValueError, match="contact.frame"):
        Plant(BENCH).set_floor_height(0.1)
