"""Scenarios aimed at chosen joints (scenarios.make(..., joints=...)).

Reference: the bundled three-joint bench (config/three_joints.yaml) has independent joints, so
its equations of motion are three separate ODEs (design notes, section 3, with a diagonal mass
matrix and per-joint gravity): a scenario aimed at one joint must give it the trajectory it has
when every joint takes the scenario, and leave the others on the trajectory they have when no
joint does (the file's sensors are noisy and the nominal model is off, so "at rest" means that
run, not a constant; the seeded noise is the same in every run). The start holds every link still
at the spring deflection that carries its gravity torque (the progressive ankle spring
k phi + k3 phi^3 included, solved by numpy.roots).
"""
import numpy as np
import pytest

from compliant_damping.io import config
from compliant_damping.control import controller
from compliant_damping.dynamics import bench_plant
from compliant_damping.sim import scenarios, simulate

CTRL, SIM = config.load(config.share_dir() / "config" / "three_joints.yaml")


@pytest.mark.parametrize("name", ["setpoint_step", "end_stop_impact", "external_impulse"])
def test_a_scenario_aimed_at_one_joint_leaves_the_independent_others_alone(name):
    run = lambda s: simulate.simulate(SIM.joints, controller.bank(CTRL), s, 0.6, substeps=SIM.substeps)  # noqa: E731
    everyone = run(scenarios.make(name, SIM.joints))
    nobody = run(scenarios.make(name, SIM.joints, joints=[]))
    knee = run(scenarios.make(name, SIM.joints, joints=["knee"]))
    k = SIM.joint_names.index("knee")
    others = [i for i in range(3) if i != k]
    assert np.max(np.abs(knee.q[:, k] - everyone.q[:, k])) < 1e-12
    assert np.max(np.abs(knee.q[:, k] - knee.q[0, k])) > 0.01  # the knee did move
    assert np.max(np.abs(knee.q[:, k] - nobody.q[:, k])) > 0.01  # and not as when held
    apart = np.max(np.abs(knee.q[:, others] - nobody.q[:, others]))
    print(f"{name}: knee as with every joint; the others {apart:.1e} rad from their held run")
    assert apart < 1e-12


def test_the_start_holds_a_progressive_spring_still():
    start = scenarios.make("setpoint_step", SIM.joints, joints=[]).initial
    params = bench_plant.pack([j.plant for j in SIM.joints])
    link_acceleration = bench_plant.derivative(params, start, np.zeros(3), np.zeros((0, 4)), 0.0)[:, 1]
    assert SIM.joints[SIM.joint_names.index("ankle")].plant.spring_cubic > 0.0
    assert np.max(np.abs(link_acceleration)) < 1e-9


def test_unknown_joint_names_are_refused():
    with pytest.raises(ValueError, match="joints: elbow not among"):
        scenarios.make("setpoint_step", SIM.joints, joints=["elbow"])


def test_the_simulated_joint_node_starts_where_the_offline_scenarios_start():
    """The node's plant stepper and the offline scenarios share the rest state (same code path,
    so a ROS run can reproduce an offline one), progressive spring included."""
    from compliant_damping.sim.plant import Plant
    assert np.array_equal(Plant(SIM).x, scenarios.make("setpoint_step", SIM.joints).initial)
