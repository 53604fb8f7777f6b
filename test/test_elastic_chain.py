"""The elastic-joint robot plant on coupled links (dynamics/elastic_chain.py).

References:

* the one-joint plant (bench_plant.advance, checked in test_bench_plant.py against the two-mass resonance
  formula, energy conservation and scipy's solve_ivp): the pendulum URDF with the bench knee's
  numbers must give the same trajectory with friction, end stops and a torque profile;
* conservation of energy (kinetic + spring + gravity) of a free, undamped elastic chain;
* scipy's solve_ivp (DOP853, events where the contact engages and where its push-only force
  reaches zero) for a pendulum tip swinging into a wall: the restitution of the contact model
  over the fixed-step RK4 plant.
"""
import dataclasses

import numpy as np
import pytest
from scipy.integrate import solve_ivp

pytest.importorskip("pinocchio", reason="URDF chains need Pinocchio (the pin package)")

from compliant_damping.io import config  # noqa: E402
from compliant_damping.dynamics import bench_plant
from compliant_damping.dynamics.elastic_chain import ElasticChain, ElasticElements, PlaneContact  # noqa: E402
from compliant_damping.dynamics.urdf_chain import UrdfChain, bundled_urdf  # noqa: E402

CTRL, SIM = config.load(config.bundled())
KNEE = SIM.joints[0].plant
LEG_JOINTS = ["hip_pitch", "knee_pitch", "ankle_pitch"]


def _no_external(n):
    zeros = np.zeros(n)
    return lambda t: zeros


def test_pendulum_urdf_plant_equals_the_bench_plant():
    """Friction, spring damping, an end stop hit and a torque profile: 1 s at 10 kHz, to 1e-10 rad."""
    chain = ElasticChain(UrdfChain.from_file(bundled_urdf("pendulum.urdf"), ["knee"]),
                         ElasticElements.from_joint_params([KNEE]))
    params = bench_plant.pack([KNEE])
    x_bench = np.array([[0.7, 1.5, 0.72, 1.4]])
    x_chain = x_bench.copy()
    h, substeps = 1e-4, 10
    for k in range(1000):
        tau = np.array([3.0 * np.sin(7.0 * k * 1e-3)])
        bench_plant.advance(x_bench, params, tau, bench_plant.NO_EXTERNAL, k * 1e-3, h, substeps)
        chain.advance(x_chain, tau, _no_external(1), k * 1e-3, h, substeps)
    assert np.max(np.abs(x_chain - x_bench)) < 1e-10


def _leg(**changes):
    links = UrdfChain.from_file(bundled_urdf("compliant_leg.urdf"), LEG_JOINTS)
    elements = ElasticElements.lossless([0.3, 0.2, 0.05], [800.0, 600.0, 300.0])
    return links, dataclasses.replace(elements, **changes)


def test_free_undamped_elastic_chain_keeps_its_energy():
    """The bundled leg released from a deflected, moving state: 10 s at 5 kHz, drift below 1e-6 of the energy."""
    links, elements = _leg()
    chain = ElasticChain(links, elements)
    q0 = np.array([0.3, -0.6, 0.2])
    x = np.stack([q0, np.array([0.5, -0.5, 1.0]), q0 + np.array([0.02, -0.03, 0.01]), np.zeros(3)], axis=1)
    e0 = chain.energy(x)
    h = 2e-4
    for k in range(1000):  # 10 s in steps of 10 ms
        chain.advance(x, np.zeros(3), _no_external(3), k * 0.01, h, 50)
    drift = abs(chain.energy(x) - e0) / abs(e0)
    print(f"free elastic leg: energy {e0:.6f} J, relative drift {drift:.2e} over 10 s")
    assert drift < 1e-6


TIP_PENDULUM = """<?xml version="1.0"?>
<robot name="tip_pendulum">
  <link name="base"/>
  <joint name="swing" type="revolute">
    <parent link="base"/><child link="rod"/><axis xyz="0 1 0"/>
    <limit lower="-1" upper="1" effort="10" velocity="10"/>
  </joint>
  <link name="rod">
    <inertial><origin xyz="0 0 -0.25"/><mass value="1.0"/>
      <inertia ixx="0.02" ixy="0" ixz="0" iyy="0.02" iyz="0" izz="0.001"/></inertial>
  </link>
  <joint name="tip_mount" type="fixed"><parent link="rod"/><child link="tip"/><origin xyz="0 0 -0.5"/></joint>
  <link name="tip"/>
</robot>"""


def test_frame_hitting_a_plane_bounces_with_the_contact_models_restitution():
    """A stiff elastic pendulum swings its tip into a wall: the tip's normal speed after the bounce
    over the speed before equals that of an event-based solve_ivp run of the same push-only contact
    within 2 % (the end-stop test's reference, here through J(q)^T n f)."""
    links = UrdfChain(TIP_PENDULUM, ["swing"])
    elements = dataclasses.replace(ElasticElements.from_joint_params([KNEE]), motor_inertia=np.array([0.01]),
                                   spring_stiffness=np.array([3e4]), spring_damping=np.zeros(1),
                                   link_viscous=np.zeros(1), motor_viscous=np.zeros(1), motor_coulomb=np.zeros(1),
                                   stop_lower=np.full(1, -np.inf), stop_upper=np.full(1, np.inf))
    wall = PlaneContact("tip", height=-0.5 * np.sin(0.1), normal=(-1.0, 0.0, 0.0), stiffness=2e4, damping=20.0)
    chain = ElasticChain(links, elements, [wall])
    x0 = np.array([[0.0, 1.0, 0.0, 1.0]])  # hanging, swinging towards the wall at 1 rad/s
    tau_m = np.zeros(1)

    def normal_speed(x):
        return float(np.array(wall.normal) @ (links.frame_jacobian("tip", x[:, 0])[:3] @ x[:, 1]))

    def push(x):
        """The contact force before the push-only clamp (N)."""
        d, row = wall.depth_and_jacobian(links, x[:, 0])
        return wall.stiffness * d - wall.damping * float(row @ x[:, 1]) if d > 0.0 else -1.0

    # fixed-step RK4 as the simulator runs it: speeds at the last sample before the contact
    # engages and the first one after its force has reached zero
    x, h, v_before, e_rk4 = x0.copy(), 1e-4, None, None
    for k in range(10000):
        v_last = normal_speed(x)
        chain.advance(x, tau_m, _no_external(1), k * h, h, 1)
        if v_before is None and push(x) > 0.0:
            v_before = v_last
        elif v_before is not None and push(x) <= 0.0:
            e_rk4 = -normal_speed(x) / v_before
            break
    assert v_before is not None and e_rk4 is not None, "no complete bounce"

    # reference: the same equations, solve_ivp with events where the contact engages and releases

    def rhs(t, y):
        xx = y.reshape(4, 1).T
        return chain.rates(xx, tau_m, np.zeros(1)).T.ravel()

    def touch(t, y):
        return wall.depth_and_jacobian(links, y.reshape(4, 1).T[:, 0])[0]
    touch.terminal, touch.direction = True, 1.0
    before = solve_ivp(rhs, (0.0, 1.0), x0.T.ravel(), method="DOP853", rtol=1e-11, atol=1e-12, events=touch)
    y_in = before.y[:, -1]
    v_in = normal_speed(y_in.reshape(4, 1).T)

    def release(t, y):
        xx = y.reshape(4, 1).T
        d, row = wall.depth_and_jacobian(links, xx[:, 0])
        return wall.stiffness * d - wall.damping * float(row @ xx[:, 1])  # the push-only force reaches zero
    release.terminal, release.direction = True, -1.0
    during = solve_ivp(rhs, (before.t[-1], before.t[-1] + 0.5), y_in, method="DOP853", rtol=1e-11, atol=1e-12,
                       events=release, first_step=1e-7)
    v_out = normal_speed(during.y[:, -1].reshape(4, 1).T)
    e_ref = -v_out / v_in
    print(f"tip bounce: restitution RK4 {e_rk4:.4f}, event-based solve_ivp {e_ref:.4f} (touch-down {v_in:.3f} m/s)")
    assert v_in < -0.1 and 0.05 < e_ref < 1.0  # it hit the wall, and the contact lost energy
    assert e_rk4 == pytest.approx(e_ref, rel=0.02)
