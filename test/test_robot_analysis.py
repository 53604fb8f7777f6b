"""Linearisation of a robot's closed loop (analysis/robot_linear.py) against outside references.

* The two-link arm with gravity under link_damping with exact model knowledge: the poles of the
  linearised running code equal the eigenvalues of the target closed loop of the design notes
  (section 4) linearised by hand at q_d, with M(q_d) and dg/dq(q_d) from Pinocchio:
      M dq'' = -(dg/dq + K) dq + K deta - D_l dq',   B deta'' = K dq - (K + K_eta) deta - D_eta deta'
  (scipy.linalg.eigvals; the coordinates differ by eta = theta - u1/K, a similarity transform).
* The pendulum URDF: the poles equal the bench joint's analysis (linear.analyze, itself checked
  against hand-derived characteristic polynomials and python-control).
"""
import dataclasses

import numpy as np
import pytest
from scipy.linalg import eigvals

pytest.importorskip("pinocchio", reason="URDF chains need Pinocchio (the pin package)")

from compliant_damping.analysis import linear  # noqa: E402
from compliant_damping.io import config
from compliant_damping.control.controller import stack_gains  # noqa: E402
from compliant_damping.dynamics.elastic_chain import ElasticChain, ElasticElements  # noqa: E402
from compliant_damping.dynamics.urdf_chain import UrdfChain, bundled_urdf  # noqa: E402
from compliant_damping.control.laws import LAW_NAMES, ChainNominal, Gains, make_law  # noqa: E402
from compliant_damping.analysis.robot_linear import linearize_robot, rendered_link_stiffness, robot_modes  # noqa: E402

CTRL, SIM = config.load(config.bundled())


def _sorted(p):
    return np.array(sorted(p, key=lambda z: (round(z.real, 6), round(z.imag, 6))))


def test_two_link_arm_poles_equal_the_target_loop_linearised_by_hand():
    links = UrdfChain.from_file(bundled_urdf("two_link_arm.urdf"), ["shoulder", "elbow"])
    B, K = np.array([0.2, 0.1]), np.array([400.0, 250.0])
    n = 2
    elements = ElasticElements.lossless(B, K)
    gains = stack_gains([Gains(motor_stiffness=300.0, motor_damping=8.0, link_damping=4.0),
                         Gains(motor_stiffness=200.0, motor_damping=5.0, link_damping=2.0)])
    law = make_law("link_damping", ChainNominal(links, B, K), gains)
    q_d = np.array([0.4, -0.3])
    lin = linearize_robot(ElasticChain(links, elements), law, q_d)
    np.testing.assert_allclose(lin.equilibrium[:n], q_d, atol=1e-9)
    m_inv = np.linalg.inv(links.mass_matrix(q_d))
    G = links.gravity_jacobian(q_d)
    Kd, Bi = np.diag(K), np.diag(1.0 / B)
    I, Z = np.eye(n), np.zeros((n, n))
    target = np.block([[Z, I, Z, Z],
                       [-m_inv @ (G + Kd), -m_inv @ np.diag(gains.link_damping), m_inv @ Kd, Z],
                       [Z, Z, Z, I],
                       [Bi @ Kd, Z, -Bi @ (Kd + np.diag(gains.motor_stiffness)), -Bi @ np.diag(gains.motor_damping)]])
    ours, theirs = _sorted(eigvals(lin.a)), _sorted(eigvals(target))
    err = np.max(np.abs(ours - theirs) / np.abs(theirs))
    modes = robot_modes(lin)
    print(f"two-link arm, link_damping: pole error {err:.1e} relative; least damped "
          f"{min(m.damping_ratio for m in modes):.3f}")
    assert err < 1e-6


@pytest.mark.parametrize("law", [name for name in LAW_NAMES if name != "zero"])
def test_pendulum_urdf_poles_equal_the_bench_analysis(law):
    joint, plant_params = CTRL.joints[0], SIM.joints[0].plant
    links = UrdfChain.from_file(bundled_urdf("pendulum.urdf"), ["knee"])
    nominal = ChainNominal(links, np.array([joint.model.motor_inertia]), np.array([joint.model.spring_stiffness]))
    gains = dataclasses.replace(joint.gains, link_stiffness=40.0)
    chain = ElasticChain(links, ElasticElements.from_joint_params([plant_params]))
    lin = linearize_robot(chain, make_law(law, nominal, stack_gains([gains])), np.array([0.2]))
    bench = linear.analyze(plant_params, make_law(law, joint.model, gains), 0.2)
    np.testing.assert_allclose(_sorted(eigvals(lin.a)), _sorted(bench.poles), rtol=1e-6)


def test_two_link_arm_motor_pd_renders_series_springs_plus_the_gravity_slope():
    """Reference: per joint the motor's PD spring K_theta in series with the joint spring K,
    K K_theta / (K + K_theta) (handbook series-spring formula, as test_analysis.py's one-joint
    check), plus the gravity stiffness dg/dq(q_d) of the coupled links in parallel (statics of
    M q'' + c + g = tau: the gravity torque's slope adds to the restoring stiffness)."""
    links = UrdfChain.from_file(bundled_urdf("two_link_arm.urdf"), ["shoulder", "elbow"])
    B, K = np.array([0.2, 0.1]), np.array([400.0, 250.0])
    k_theta = np.array([300.0, 200.0])
    gains = stack_gains([Gains(motor_stiffness=300.0, motor_damping=8.0), Gains(motor_stiffness=200.0, motor_damping=5.0)])
    q_d = np.array([0.4, -0.3])
    lin = linearize_robot(ElasticChain(links, ElasticElements.lossless(B, K)),
                          make_law("motor_pd", ChainNominal(links, B, K), gains), q_d)
    want = np.diag(K * k_theta / (K + k_theta)) + links.gravity_jacobian(q_d)
    got = rendered_link_stiffness(lin)
    print(f"rendered link stiffness\n{got}\nwant\n{want}")
    np.testing.assert_allclose(got, want, rtol=1e-6, atol=1e-6 * np.max(np.abs(want)))
