"""The plant alone (bench_plant.py) against analytic results and scipy's reference integrators.

Every joint here is invented for the test. The plant step is the default 10 kHz
(1 kHz control tick, 10 RK4 substeps) unless a test says otherwise.
"""
import math

import numpy as np
import pytest
from scipy.integrate import solve_ivp

from compliant_damping.dynamics import bench_plant
from compliant_damping.dynamics.bench_plant import JointParams

H = 1e-4          # s, default plant step (control_dt 1 ms / 10 substeps)
SAMPLE = 1e-3     # s, recording period of the helper below
DECOUPLED = 1e-9  # N m/rad, a spring so soft that link and motor move independently


def run(joint, x0, tau=0.0, duration=1.0, ext=bench_plant.NO_EXTERNAL):
    """(t, states, applied torque) from bench_plant.advance, recorded every SAMPLE s; states are (samples, 4)."""
    params = bench_plant.pack([joint])
    x = np.array([x0], dtype=float)
    torque = np.array([tau], dtype=float)
    n, per = round(duration / SAMPLE), round(SAMPLE / H)
    out = np.empty((n + 1, 4))
    out[0] = x[0]
    applied = None
    for i in range(n):
        applied = bench_plant.advance(x, params, torque, ext, i * SAMPLE, H, per)[0]
        out[i + 1] = x[0]
    return np.arange(n + 1) * SAMPLE, out, applied


def crossing_frequency(t, y):
    """Frequency (Hz) of a zero-mean oscillation from its zero crossings, linearly interpolated."""
    i = np.nonzero(np.signbit(y[:-1]) != np.signbit(y[1:]))[0]
    tc = t[i] - y[i] * (t[i + 1] - t[i]) / (y[i + 1] - y[i])
    assert len(tc) >= 20, "too few crossings to measure a frequency"
    return 0.5 * (len(tc) - 1) / (tc[-1] - tc[0])  # two crossings per period


def test_two_mass_resonance():
    """Free joint, no losses: deflection rings at sqrt(k (1/M + 1/B)) / 2 pi.

    Reference: natural frequency of two masses joined by a spring (free-free
    two-degree-of-freedom system), e.g. Thomson and Dahleh, Theory of Vibration with
    Applications, chapter on two-degree-of-freedom systems (from memory).
    """
    joint = JointParams(link_inertia=0.4, motor_inertia=0.1, spring_stiffness=250.0, coulomb_speed=1.0)
    t, x, _ = run(joint, [0.0, 0.0, 0.03, 0.0], duration=3.0)
    expected = math.sqrt(250.0 * (1 / 0.4 + 1 / 0.1)) / (2 * math.pi)
    measured = crossing_frequency(t, x[:, 2] - x[:, 0])
    print(f"two-mass: measured {measured:.6f} Hz, analytic {expected:.6f} Hz, "
          f"error {measured / expected - 1:+.2e}")
    assert measured == pytest.approx(expected, rel=5e-3)


def test_motor_held_link_frequency():
    """Motor so heavy it stays put: the link rings at sqrt(k/M) / 2 pi (single-degree-of-freedom oscillator).

    Reference: undamped mass-spring natural frequency, any vibrations textbook.
    The finite motor inertia shifts the frequency by a relative 0.5 M/B = 3e-10.
    """
    joint = JointParams(link_inertia=0.3, motor_inertia=5e8, spring_stiffness=420.0)
    t, x, _ = run(joint, [0.04, 0.0, 0.0, 0.0], duration=3.0)
    expected = math.sqrt(420.0 / 0.3) / (2 * math.pi)
    measured = crossing_frequency(t, x[:, 0] - x[:, 2])
    print(f"motor held: measured {measured:.6f} Hz, analytic {expected:.6f} Hz, "
          f"error {measured / expected - 1:+.2e}")
    assert measured == pytest.approx(expected, rel=5e-3)
    assert np.max(np.abs(x[:, 2])) < 1e-6  # the motor really stayed put


def test_energy_conserved_without_losses():
    """No damping, no contact, zero torque; gravity load and progressive spring: energy stays constant.

    Reference: conservation of mechanical energy for a conservative system (Lagrangian
    mechanics); the total is kinetic + k phi^2/2 + k3 phi^4/4 + m g0 l (1 - cos(q + q_off)).
    """
    joint = JointParams(link_inertia=0.35, motor_inertia=0.12, spring_stiffness=180.0, spring_cubic=4.0e4,
                        gravity_torque=3.0, gravity_offset=0.3)
    params = bench_plant.pack([joint])
    x = np.array([[0.2, 1.5, 0.27, -0.8]])
    e0 = bench_plant.energy(params, x)[0]
    for i in range(10_000):  # 10 s in 1 ms ticks of 10 substeps
        bench_plant.advance(x, params, np.zeros(1), bench_plant.NO_EXTERNAL, i * SAMPLE, H, 10)
    drift = abs(bench_plant.energy(params, x)[0] / e0 - 1.0)
    print(f"energy: E0 {e0:.6f} J, relative drift over 10 s {drift:.2e}")
    assert e0 > 1.0  # the state really carries energy in every term
    assert drift < 1e-6


def test_smooth_motion_matches_solve_ivp():
    """Gravity, viscous losses, held motor torque: RK4 at 10 kHz agrees with scipy's DOP853.

    Reference: scipy.integrate.solve_ivp (DOP853, rtol 1e-10, atol 1e-12) on
    bench_plant.derivative, i.e. an independent adaptive integrator on the same equations.
    """
    joint = JointParams(link_inertia=0.3, motor_inertia=0.08, spring_stiffness=260.0, spring_cubic=800.0,
                        spring_damping=0.03, link_viscous=0.05, motor_viscous=0.1,
                        gravity_torque=2.5, gravity_offset=-0.2)
    x0, tau = [0.1, 0.0, 0.15, 0.0], 1.2
    t, x, _ = run(joint, x0, tau=tau, duration=5.0)
    params, torque = bench_plant.pack([joint]), np.array([tau])
    ref = solve_ivp(lambda tt, y: bench_plant.derivative(params, y.reshape(1, 4), torque, bench_plant.NO_EXTERNAL, tt).ravel(),
                    (0.0, 5.0), x0, method="DOP853", rtol=1e-10, atol=1e-12, t_eval=t)
    assert ref.success
    err = np.max(np.abs(x[:, 0] - ref.y[0]))
    print(f"solve_ivp: max |q - q_ref| over 5 s = {err:.2e} rad (link swing {np.ptp(x[:, 0]):.3f} rad)")
    assert np.ptp(x[:, 0]) > 0.05  # the link really moved
    assert err < 1e-6


def _contact_restitution(m, k, d, v, clipped):
    """Restitution of a mass m hitting a spring-damper wall (k, d) at speed v, by event-based solve_ivp.

    Penetration p, p'' = -F/m with F = k p + d p'. ``clipped``: the wall only pushes, so the
    mass leaves when F reaches zero (F would turn into a pull); otherwise when p returns to zero.
    Written here from the contact law of the design notes, independently of bench_plant.py.
    """
    def rhs(_, y):
        return [y[1], -(k * y[0] + d * y[1]) / m]

    def release(_, y):
        return k * y[0] + d * y[1] if clipped else y[0]
    release.terminal, release.direction = True, -1
    sol = solve_ivp(rhs, (0.0, 1.0), [0.0, v], method="DOP853", rtol=1e-12, atol=1e-14,
                    events=release, first_step=1e-7)
    assert sol.status == 1  # stopped on the release event
    return -sol.y_events[0][0][1] / v


def test_end_stop_restitution():
    """A free link bouncing on the lower end stop leaves with the restitution of a push-only contact.

    References: (a) the closed form e = exp(-zeta pi / sqrt(1 - zeta^2)) of a linear
    spring-damper (Kelvin-Voigt) contact that releases at zero penetration: the speed
    ratio of a damped linear oscillator over half a damped period, any vibrations
    textbook; here zeta = 0.3 gives e = 0.372.
    Our contact only pushes, so it releases earlier, when k p + d p' = 0, and the mass
    keeps more speed: (b) an event-based scipy solve_ivp of that clipped contact gives
    e = 0.451 for these numbers. The production integrator is asserted against (b); (a) is
    checked against the same event-based solver run without clipping.
    """
    m, k, d, v = 0.5, 2.0e4, 60.0, 1.0
    zeta = d / (2.0 * math.sqrt(k * m))
    joint = JointParams(link_inertia=m, motor_inertia=0.1, spring_stiffness=DECOUPLED,
                        stop_lower=0.0, stop_stiffness=k, stop_damping=d)
    _, x, _ = run(joint, [0.05, -v, 0.05, -v], duration=0.2)
    measured = x[-1, 1] / v
    clipped = _contact_restitution(m, k, d, v, clipped=True)
    unclipped = _contact_restitution(m, k, d, v, clipped=False)
    closed_form = math.exp(-zeta * math.pi / math.sqrt(1.0 - zeta**2))
    print(f"restitution: model {measured:.5f}, event-based clipped {clipped:.5f}, "
          f"event-based unclipped {unclipped:.5f}, closed form (unclipped) {closed_form:.5f}")
    assert x[-1, 0] > 0.0 and np.min(x[:, 0]) < 0.0  # it did hit the stop and leave it
    assert measured == pytest.approx(clipped, rel=0.02)
    assert unclipped == pytest.approx(closed_form, rel=0.02)
    assert clipped > 1.1 * closed_form  # the clipping matters far beyond the tolerance here


def test_impulse_changes_link_momentum():
    """A scripted torque pulse of impulse J on a free link changes its momentum by J.

    Reference: impulse-momentum theorem (Newton's second law integrated over the pulse). The
    link is free (no gravity, a decoupled spring), so the momentum change is J up to rounding;
    the pulse's ends lie on the step grid, where the held scripted torque integrates exactly.
    """
    m, impulse, width = 0.25, 0.3, 0.005
    joint = JointParams(link_inertia=m, motor_inertia=0.15, spring_stiffness=DECOUPLED)
    ext = np.array([[0.0, 0.2, 0.2 + width, impulse / width]])
    _, x, _ = run(joint, [0.0, 0.0, 0.0, 0.0], duration=0.4, ext=ext)
    print(f"impulse: J {impulse} N m s, momentum change {m * x[-1, 1]:.6f} N m s")
    assert m * x[-1, 1] == pytest.approx(impulse, rel=1e-9)
    assert x[-1, 3] == pytest.approx(0.0, abs=1e-9)  # the motor did not take part


def test_driver_saturation_is_exactly_the_limit():
    """A command above the driver limit moves the motor exactly as the limit does.

    Reference: constant acceleration kinematics, theta = theta0 + tau_max t^2 / (2 B)
    for a free motor (no friction, spring decoupled).
    """
    b, limit = 0.2, 5.0
    joint = JointParams(link_inertia=0.3, motor_inertia=b, spring_stiffness=DECOUPLED, driver_torque_limit=limit)
    t, over, applied = run(joint, [0.0, 0.0, 0.0, 0.0], tau=-80.0, duration=0.5)
    _, at_limit, _ = run(joint, [0.0, 0.0, 0.0, 0.0], tau=-limit, duration=0.5)
    assert applied == -limit
    np.testing.assert_array_equal(over, at_limit)
    np.testing.assert_allclose(over[:, 2], -0.5 * limit / b * t**2, rtol=1e-9, atol=1e-12)


def test_coulomb_friction_smoothing():
    """Smoothed Coulomb friction tau_c tanh(theta'/v_c) on the motor.

    Below tau_c the motor only creeps, at the speed where friction balances the torque,
    v_c artanh(tau/tau_c) (steady state of the smoothed model); above tau_c it
    accelerates at (tau - tau_c)/B (Newton's second law with dry friction).
    """
    b, tau_c, v_c = 0.1, 0.5, 0.01
    joint = JointParams(link_inertia=0.3, motor_inertia=b, spring_stiffness=DECOUPLED,
                        motor_coulomb=tau_c, coulomb_speed=v_c)
    _, below, _ = run(joint, [0.0, 0.0, 0.0, 0.0], tau=0.3, duration=1.0)
    creep = v_c * math.atanh(0.3 / tau_c)
    assert below[-1, 3] == pytest.approx(creep, rel=1e-6)
    assert 0.0 < below[-1, 2] < creep * 1.0  # 1 s at no more than the creep speed
    t, above, _ = run(joint, [0.0, 0.0, 0.0, 0.0], tau=1.5, duration=1.0)
    i0, i1 = 500, 1000  # 0.5 s to 1.0 s: well above v_c, tanh = 1
    accel = (above[i1, 3] - above[i0, 3]) / (t[i1] - t[i0])
    print(f"coulomb: creep {below[-1, 3]:.6f} rad/s (expected {creep:.6f}), "
          f"acceleration {accel:.6f} rad/s^2 (expected {(1.5 - tau_c) / b:.6f})")
    assert accel == pytest.approx((1.5 - tau_c) / b, rel=1e-6)
