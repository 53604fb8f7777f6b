"""linear.py against outside references: hand-derived characteristic polynomials (numpy.roots),
python-control state-space models built from the design notes' target closed loop, and handbook
formulas (two-mass resonance, series springs)."""
import dataclasses
import math

import control
import numpy as np
import pytest
from scipy.optimize import linear_sum_assignment

from compliant_damping.analysis import linear
from compliant_damping.io import config
from compliant_damping.control.laws import make_law

CTRL, SIM = config.load(config.bundled())
JOINT = CTRL.joints[0]
# The bundled bench joint with its dissipation removed: the ideal linear joint of the derivations.
PLANT = dataclasses.replace(SIM.joints[0].plant, spring_damping=0.0, link_viscous=0.0, motor_viscous=0.0,
                            motor_coulomb=0.0)
Q_D = 0.3  # rad: set point away from 0 so the gravity slope m g0 l cos(q_d) is not the trivial one
M, B, K_S = PLANT.link_inertia, PLANT.motor_inertia, PLANT.spring_stiffness
G1 = PLANT.gravity_torque * math.cos(Q_D + PLANT.gravity_offset)  # g'(q_d), N m/rad
G = JOINT.gains
K, D, D_L, K_V = G.motor_stiffness, G.motor_damping, G.link_damping, G.decoupling_stiffness


def _poles(law_name):
    return linear.analyze(PLANT, make_law(law_name, JOINT.model, G), Q_D).poles


def _max_rel_error(got, want):
    """Largest |p - r| / |r| after pairing the two pole sets one to one (Hungarian matching)."""
    got, want = np.asarray(got), np.asarray(want)
    assert len(got) == len(want)
    cost = np.abs(got[:, None] - want[None, :])
    rows, cols = linear_sum_assignment(cost)
    return float(np.max(cost[rows, cols] / np.abs(want[cols])))


def _hand_polynomial(law_name):
    """Closed-loop characteristic polynomial of the linear joint, derived by hand.

    Linearised target loop (design notes, section 4; exact model, deviations from equilibrium):
        M q'' = k (eta - q) + u1 - g' q,    B eta'' = k (q - eta) - K eta - D eta'
    with eta = theta and u1 = 0 for motor_pd. Laplace, motor side: eta = k q / P_m with
    P_m = B s^2 + D s + K + k. Link side:
        motor_pd:          (M s^2 + k + g') P_m - k^2 = 0
        link_damping:      u1 = -D_l s q        ->  (M s^2 + D_l s + k + g') P_m - k^2 = 0
        decoupled_damper:  D_v s x = k_v (q - x)  ->  u1 = -k_v D_v s / (D_v s + k_v) q, so
            [(M s^2 + k + g')(D_v s + k_v) + k_v D_v s] P_m - k^2 (D_v s + k_v) = 0
    """
    p_m = [B, D, K + K_S]
    if law_name == "motor_pd":
        return np.polysub(np.polymul([M, 0.0, K_S + G1], p_m), [K_S**2])
    if law_name == "link_damping":
        return np.polysub(np.polymul([M, D_L, K_S + G1], p_m), [K_S**2])
    damper = [D_L, K_V]
    link = np.polyadd(np.polymul([M, 0.0, K_S + G1], damper), [K_V * D_L, 0.0])
    return np.polysub(np.polymul(link, p_m), np.polymul([K_S**2], damper))


def _control_model(law_name):
    """python-control ss of the design notes' target loop, states [q, q', eta, eta', (x)]."""
    link = [-(K_S + G1) / M, 0.0, K_S / M, 0.0]
    motor = [K_S / B, 0.0, -(K_S + K) / B, -D / B]
    if law_name == "link_damping":
        link[1] = -D_L / M
    if law_name != "decoupled_damper":
        a = [[0, 1, 0, 0], link, [0, 0, 0, 1], motor]
    else:
        a = [[0, 1, 0, 0, 0], [link[0] - K_V / M, 0, K_S / M, 0, K_V / M], [0, 0, 0, 1, 0], motor + [0.0],
             [K_V / D_L, 0, 0, 0, -K_V / D_L]]
    n = len(a)
    return control.ss(np.array(a, dtype=float), np.zeros((n, 1)), np.eye(n)[:1], np.zeros((1, 1)))


@pytest.mark.parametrize("law_name", ["motor_pd", "link_damping", "decoupled_damper"])
def test_poles_match_hand_polynomial(law_name):
    """Reference: roots of the hand-derived characteristic polynomial (numpy.roots), 1e-6 relative."""
    assert _max_rel_error(_poles(law_name), np.roots(_hand_polynomial(law_name))) < 1e-6


@pytest.mark.parametrize("law_name", ["motor_pd", "link_damping", "decoupled_damper"])
def test_poles_match_python_control(law_name):
    """Reference: control.poles of a state-space model written from design.md's equations, 1e-6 relative."""
    assert _max_rel_error(_poles(law_name), control.poles(_control_model(law_name))) < 1e-6


def test_two_mass_resonance_without_control():
    """Reference: free two-mass resonance w^2 = k (1/M + 1/B) (handbook formula, from memory);
    gravity off, zero torque: one pole pair at +-j w, undamped, plus a rigid-body double pole at 0."""
    plant = dataclasses.replace(PLANT, gravity_torque=0.0)
    res = linear.analyze(plant, make_law("zero", JOINT.model, G), 0.0)
    w = math.sqrt(K_S * (1.0 / M + 1.0 / B))
    top = max(res.modes, key=lambda m: m.natural_frequency)
    assert top.natural_frequency == pytest.approx(w, rel=1e-6)
    assert abs(top.damping_ratio) < 1e-6
    assert res.static_link_stiffness == 0.0  # nothing holds the link: it drifts


def test_static_stiffness_series_springs_motor_pd():
    """Reference: series springs K_theta and k, kK/(k+K), plus the gravity slope g'(q_d) in parallel
    (handbook formula). The DC link admittance is its inverse."""
    res = linear.analyze(PLANT, make_law("motor_pd", JOINT.model, G), Q_D)
    want = K_S * K / (K_S + K) + G1
    assert res.static_link_stiffness == pytest.approx(want, rel=1e-6)
    assert abs(linear.link_admittance(res.linear, 0.0)[0]) == pytest.approx(1.0 / want, rel=1e-6)


def test_dominant_and_least_damped_modes_are_defined_as_documented():
    res = linear.analyze(PLANT, make_law("decoupled_damper", JOINT.model, G), Q_D)
    assert res.dominant.decay_rate == min(-p.real for p in res.poles)
    assert res.least_damped.damping_ratio == min(m.damping_ratio for m in res.modes)
    assert res.stable
    # the conjugate pairs are one mode each: 5 poles = 1 real + 2 pairs
    assert len(res.poles) == 5 and len(res.modes) == 3


def test_equilibrium_outside_stops_is_refused():
    with pytest.raises(linear.AnalysisError, match="q_d"):
        linear.analyze(PLANT, make_law("motor_pd", JOINT.model, G), PLANT.stop_upper + 0.1)


def test_virtual_mass_and_shaped_motor_inertia_match_python_control():
    """Second-order damper m_v x'' + D_v x' = k_v (q - x) with motor inertia shaping B_d: target loop
    (design notes) M q'' = k (eta - q) - k_v (q - x) - g' q, B_d eta'' = k (q - eta) - K eta - D eta',
    as a python-control ss with states [q, q', eta, eta', x, x']; poles agree to 1e-6 relative."""
    m_v, b_d = 0.02, 0.08
    gains = dataclasses.replace(G, virtual_mass=m_v, motor_inertia_target=b_d)
    got = linear.analyze(PLANT, make_law("decoupled_damper", JOINT.model, gains), Q_D).poles
    a = np.array([[0, 1, 0, 0, 0, 0],
                  [-(K_S + G1 + K_V) / M, 0, K_S / M, 0, K_V / M, 0],
                  [0, 0, 0, 1, 0, 0],
                  [K_S / b_d, 0, -(K_S + K) / b_d, -D / b_d, 0, 0],
                  [0, 0, 0, 0, 0, 1],
                  [K_V / m_v, 0, 0, 0, -K_V / m_v, -D_L / m_v]])
    sys_ = control.ss(a, np.zeros((6, 1)), np.eye(6)[:1], np.zeros((1, 1)))
    assert _max_rel_error(got, control.poles(sys_)) < 1e-6


def test_link_admittance_high_frequency_is_the_link_inertia():
    """Reference: far above every closed-loop mode the link is a free inertia, q/tau = -1/(M w^2)
    (mass impedance, handbook formula); checked at 2 kHz within 1 %."""
    res = linear.analyze(PLANT, make_law("decoupled_damper", JOINT.model, G), Q_D)
    w = 2.0 * math.pi * 2000.0
    y = linear.link_admittance(res.linear, [2000.0])[0]
    assert y.real == pytest.approx(-1.0 / (M * w * w), rel=0.01)
    assert abs(y.imag) < 0.01 * abs(y.real)
