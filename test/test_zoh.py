"""Closed-form zero-order hold of the laws' internal states (law_runner.zoh) against scipy.

Reference: the exact discretisation Ad = expm(A dt), bd = int_0^dt expm(A s) ds b, computed by
scipy.linalg.expm of the augmented matrix [[A, b], [0, 0]] dt (Van Loan, 1978), for the
first-order damper and the virtual-mass damper in its under-, critically and over-damped forms,
at tick lengths from zero to far beyond the nominal 1 ms (the jitter a node may see).
"""
import numpy as np
import pytest
from scipy.linalg import expm

from compliant_damping.control.law_runner import zoh
from compliant_damping.control.laws import DecoupledDamper, Gains, NominalModel

MODEL = NominalModel(link_inertia=0.25, motor_inertia=0.15, spring_stiffness=300.0)
DAMPERS = {
    "first order": Gains(link_damping=7.0, decoupling_stiffness=200.0),
    "mass, under-damped": Gains(link_damping=0.5, decoupling_stiffness=200.0, virtual_mass=0.02),
    "mass, critically damped": Gains(link_damping=2.0 * (200.0 * 0.02) ** 0.5, decoupling_stiffness=200.0,
                                     virtual_mass=0.02),
    "mass, over-damped": Gains(link_damping=40.0, decoupling_stiffness=200.0, virtual_mass=0.02),
    "mass, stiff": Gains(link_damping=7.0, decoupling_stiffness=1e5, virtual_mass=1e-3),
}


def by_scipy(a, b, dt):
    n = a.shape[0]
    aug = np.zeros((n + 1, n + 1))
    aug[:n, :n], aug[:n, n] = a * dt, b * dt
    e = expm(aug)
    return e[:n, :n], e[:n, n]


@pytest.mark.parametrize("name", DAMPERS)
@pytest.mark.parametrize("dt", [0.0, 1e-9, 1e-4, 5e-4, 1e-3, 1.37e-3, 2e-3, 0.05])
def test_closed_form_zoh_equals_scipy_expm(name, dt):
    a, b = DecoupledDamper(MODEL, DAMPERS[name]).state_matrices()
    ad, bd = zoh(a, b, dt)
    ad_ref, bd_ref = by_scipy(a, b, dt)
    np.testing.assert_allclose(np.array(ad), ad_ref, rtol=1e-11, atol=1e-12)
    np.testing.assert_allclose(np.array(bd), bd_ref, rtol=1e-11, atol=1e-12)
