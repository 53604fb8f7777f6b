"""Closed-form zero-order hold of the laws' internal states (law_runner.zoh_integral) against scipy.

Reference: for z' = A z + w with w held over a tick, the exact step is z(dt) = expm(A dt) z + Phi w
with Phi = int_0^dt expm(A s) ds, the upper-right block of scipy.linalg.expm of the augmented matrix
[[A, I], [0, 0]] dt (Van Loan, 1978). Checked for the first-order damper and the virtual-mass damper
in its under-, critically and over-damped forms, at tick lengths from zero to far beyond the
nominal 1 ms (the jitter a node may see); and one LawRunner tick with a moving reference against
scipy's solve_ivp of the damper's state equation with the inputs held.
"""
import numpy as np
import pytest
from scipy.integrate import solve_ivp
from scipy.linalg import expm

from compliant_damping.control.law_runner import LawRunner, zoh_integral
from compliant_damping.control.laws import DecoupledDamper, Gains, NominalModel
from compliant_damping.control.sample import JointSample, Reference

MODEL = NominalModel(link_inertia=0.25, motor_inertia=0.15, spring_stiffness=300.0)
DAMPERS = {
    "first order": Gains(link_damping=7.0, decoupling_stiffness=200.0),
    "mass, under-damped": Gains(link_damping=0.5, decoupling_stiffness=200.0, virtual_mass=0.02),
    "mass, critically damped": Gains(link_damping=2.0 * (200.0 * 0.02) ** 0.5, decoupling_stiffness=200.0,
                                     virtual_mass=0.02),
    "mass, over-damped": Gains(link_damping=40.0, decoupling_stiffness=200.0, virtual_mass=0.02),
    "mass, stiff": Gains(link_damping=7.0, decoupling_stiffness=1e5, virtual_mass=1e-3),
}


def by_scipy(a, dt):
    n = a.shape[0]
    aug = np.zeros((2 * n, 2 * n))
    aug[:n, :n], aug[:n, n:] = a * dt, np.eye(n) * dt
    return expm(aug)[:n, n:]


@pytest.mark.parametrize("name", DAMPERS)
@pytest.mark.parametrize("dt", [0.0, 1e-9, 1e-4, 5e-4, 1e-3, 1.37e-3, 2e-3, 0.05])
def test_closed_form_zoh_equals_scipy_expm(name, dt):
    a = DecoupledDamper(MODEL, DAMPERS[name]).state_matrix()
    np.testing.assert_allclose(np.array(zoh_integral(a, dt)), by_scipy(a, dt), rtol=1e-11, atol=1e-12)


@pytest.mark.parametrize("name", ["first order", "mass, under-damped"])
def test_one_tick_with_a_moving_reference_equals_solve_ivp(name):
    """The damper follows the reference (m_v (x'' - q_d'') + D_v (x' - q_d') = k_v (q - x)); over one
    2 ms tick with q, q_d' and q_d'' held, the runner's step equals solve_ivp of that equation."""
    law = DecoupledDamper(MODEL, DAMPERS[name])
    s, ref, dt = JointSample(0.31, -0.4, 0.33, 0.2), Reference(0.3, 0.8, -2.5, 4.0, 9.0), 2e-3
    runner = LawRunner(law, s)
    runner.z = (0.295, 0.6) if law.n_states == 2 else (0.295,)
    sol = solve_ivp(lambda t, z: law.state_rate(s, ref, tuple(z)), (0.0, dt), runner.z, method="DOP853",
                    rtol=1e-12, atol=1e-14)
    runner.step(s, ref, dt)
    np.testing.assert_allclose(runner.z, sol.y[:, -1], rtol=0, atol=1e-12)
