"""The sampled-loop analysis (analysis/sampled.py) against python-control and against simulation.

Outside references: python-control's ``c2d(..., method='zoh')`` of the two-mass flexible joint
(Spong 1987 reduced model, gravity slope linearised; matrices written here by hand from the
parameters), closed by hand with the discrete laws of design.md section 4; the sampling map
``z = exp(s T)`` of a continuous pole as T -> 0 (Franklin, Powell and Workman, Digital Control of
Dynamic Systems, on the z-transform; from memory); and the simulator (sim/simulate.py) showing a
set-point step settle or grow on either side of the boundary the analysis predicts.
"""
import dataclasses
import math

import control
import numpy as np
import pytest

from compliant_damping.analysis import linear, robot_linear, sampled, tuning
from compliant_damping.control.controller import JointController
from compliant_damping.control.laws import ChainNominal, make_law
from compliant_damping.control.safety import Limits
from compliant_damping.dynamics.elastic_chain import ElasticChain, ElasticElements
from compliant_damping.dynamics.links import IndependentLinks
from compliant_damping.io import config
from compliant_damping.sim import scenarios, simulate

T = 1e-3  # s: the bundled file's control rate is 1 kHz
SUBSTEPS = 10


@pytest.fixture(scope="module")
def joint():
    """(ControllerJoint, SimJoint) of the bundled one-joint file, checked to rest at q = 0 between its stops."""
    ctrl = config.controller_setup(config.layered_parameters([config.bundled()], config.CONTROLLER_NODE))
    sim = config.sim_setup(config.layered_parameters([config.bundled()], config.SIM_NODE))
    assert ctrl.control_rate == 1.0 / T and sim.substeps == SUBSTEPS
    cj, sj = ctrl.joints[0], sim.joints[0]
    assert sj.initial_position == 0.0 and sj.plant.gravity_offset == 0.0  # g(0) = 0: deviations = states
    assert sj.plant.stop_lower < 0.0 < sj.plant.stop_upper and sj.plant.spring_cubic == 0.0
    return cj, sj


def _plant_zoh(p):
    """(Phi, Gamma) of python-control's ZOH discretisation of the linearised joint at q = 0, Coulomb off.

    State (q, q', theta, theta'), input tau_m (Spong 1987, link-side units)::

        M q''     = k (theta - q) + d_s (theta' - q') - m g0 l q - d_q q'
        B theta'' = tau_m - k (theta - q) - d_s (theta' - q') - d_th theta'
    """
    m, b, k, ds = p.link_inertia, p.motor_inertia, p.spring_stiffness, p.spring_damping
    g = p.gravity_torque  # dg/dq at q = 0, offset 0
    a = np.array([[0.0, 1.0, 0.0, 0.0],
                  [-(k + g) / m, -(ds + p.link_viscous) / m, k / m, ds / m],
                  [0.0, 0.0, 0.0, 1.0],
                  [k / b, ds / b, -k / b, -(ds + p.motor_viscous) / b]])
    sysd = control.c2d(control.ss(a, [[0.0], [0.0], [0.0], [1.0 / b]], np.eye(4), np.zeros((4, 1))), T, method="zoh")
    return np.asarray(sysd.A), np.asarray(sysd.B)


def _damper_law_rows(model, gains):
    """tau_m of decoupled_damper at q_d = 0 as a row over (q, q', theta, theta', x), linearised by hand
    from design.md section 4 (first-order damper, m_v = 0; g(q) ~ m g0 l q)."""
    q, dq, th, dth, x = np.eye(5)
    k, b, m, g = model.spring_stiffness, model.motor_inertia, model.link_inertia, model.gravity_torque
    k_v, d_v = gains.decoupling_stiffness, gains.link_damping
    c = k_v / d_v
    dx = c * (q - x)                      # D_v x' = K_v (q - x)
    ddq = (k * (th - q) - g * q) / m      # model-based link acceleration
    ddx = c * (dq - dx)                   # x'' = D_v^-1 K_v (q' - x')
    u1, du1, ddu1 = -k_v * (q - x), -k_v * (dq - dx), -k_v * (ddq - ddx)
    eta, deta = th - u1 / k, dth - du1 / k
    u2 = -gains.motor_stiffness * eta - gains.motor_damping * deta   # eta_d = 0, g(q_d) = 0
    return u2 + u1 + b / k * ddu1, c


def _damper_loop(sj, cj):
    """Discrete closed loop (q, q', theta, theta', x) of decoupled_damper: ZOH plant, torque from the
    reading, then x_{k+1} = e^{-cT} x_k + (1 - e^{-cT}) q_k (exact ZOH of x' = c (q - x))."""
    phi, gamma = _plant_zoh(dataclasses.replace(sj.plant, motor_coulomb=0.0))
    tau, c = _damper_law_rows(cj.model, cj.gains)
    loop = np.zeros((5, 5))
    loop[:4, :] = np.hstack([phi, np.zeros((4, 1))]) + gamma @ tau[None, :]
    loop[4, 0], loop[4, 4] = -math.expm1(-c * T), math.exp(-c * T)
    return loop


def _assert_same_eigenvalues(ours, expected, rel=1e-6):
    """Every expected eigenvalue has one of ours within ``rel`` relative, one to one (dead-beat z = 0 of a
    delay line within 1e-9 absolute: rounding)."""
    ours, expected = list(np.asarray(ours)), np.asarray(expected)
    assert len(ours) == len(expected)
    for z in expected:
        i = int(np.argmin([abs(w - z) for w in ours]))
        assert abs(ours[i] - z) <= rel * abs(z) + 1e-9, (z, ours[i])
        ours.pop(i)


def test_motor_pd_poles_equal_python_control_zoh(joint):
    """motor_pd: tau = K (theta_d - theta) - D theta' + g(q_d); at q_d = 0 the constants vanish, so the loop
    is Phi - Gamma [0, 0, K, D] (python-control c2d, closed by hand)."""
    cj, sj = joint
    res = sampled.analyze_joint(sj.plant, make_law("motor_pd", cj.model, cj.gains), 0.0, control_dt=T,
                                substeps=SUBSTEPS)
    phi, gamma = _plant_zoh(dataclasses.replace(sj.plant, motor_coulomb=0.0))
    gain = np.array([[0.0, 0.0, cj.gains.motor_stiffness, cj.gains.motor_damping]])
    _assert_same_eigenvalues(res.eigenvalues, np.linalg.eigvals(phi - gamma @ gain))
    assert res.stable and res.map.fixed_point_residual <= 1e-12


def test_motor_pd_one_tick_delay_equals_python_control_zoh(joint):
    """With a one-tick sensor delay the torque acts on x_{k-1}:
    (x_{k+1}, x_k) = [[Phi, -Gamma L], [I, 0]] (x_k, x_{k-1})."""
    cj, sj = joint
    res = sampled.analyze_joint(sj.plant, make_law("motor_pd", cj.model, cj.gains), 0.0, control_dt=T,
                                substeps=SUBSTEPS, delay=1)
    phi, gamma = _plant_zoh(dataclasses.replace(sj.plant, motor_coulomb=0.0))
    gain = np.array([[0.0, 0.0, cj.gains.motor_stiffness, cj.gains.motor_damping]])
    loop = np.block([[phi, -gamma @ gain], [np.eye(4), np.zeros((4, 4))]])
    _assert_same_eigenvalues(res.eigenvalues, np.linalg.eigvals(loop))


def test_decoupled_damper_poles_equal_hand_built_discrete_loop(joint):
    """decoupled_damper: python-control's ZOH plant closed with the law's discrete update built by hand
    (design.md section 4), at the file's k_v and at a stiff k_v where the 1 kHz loop is unstable."""
    cj, sj = joint
    for kv in (cj.gains.decoupling_stiffness, 5000.0):
        c = dataclasses.replace(cj, gains=dataclasses.replace(cj.gains, decoupling_stiffness=kv))
        res = sampled.analyze_joint(sj.plant, make_law("decoupled_damper", c.model, c.gains), 0.0,
                                    control_dt=T, substeps=SUBSTEPS)
        expected = np.linalg.eigvals(_damper_loop(sj, c))
        _assert_same_eigenvalues(res.eigenvalues, expected)
        assert res.stable == bool(np.max(np.abs(expected)) < 1.0)
    assert not res.stable and linear.analyze(sj.plant, make_law("decoupled_damper", c.model, c.gains)).stable


def test_chain_path_on_the_bundled_joint_equals_hand_built_discrete_loop(joint):
    """The robot path (ElasticChain.advance, the law on a ChainNominal with array gains) on the bundled
    joint as a one-joint chain gives the same hand-built discrete loop's eigenvalues."""
    cj, sj = joint
    plant = ElasticChain(IndependentLinks.from_params([sj.name], [sj.plant]),
                         ElasticElements.from_joint_params([sj.plant]))
    nominal = ChainNominal(IndependentLinks.from_params([cj.name], [cj.model]), np.array([cj.model.motor_inertia]),
                           np.array([cj.model.spring_stiffness]))
    gains = type(cj.gains)(**{f.name: np.array([getattr(cj.gains, f.name)]) for f in dataclasses.fields(cj.gains)})
    res = sampled.analyze_robot(plant, make_law("decoupled_damper", nominal, gains), [0.0], control_dt=T,
                                substeps=SUBSTEPS)
    _assert_same_eigenvalues(res.eigenvalues, np.linalg.eigvals(_damper_loop(sj, cj)))
    assert all(m.joint_shares.tolist() in ([1.0], [0.0]) for m in res.modes)


def test_leg_sampled_fast_approaches_exp_of_continuous_poles():
    """URDF leg (three coupled joints): at a 20 kHz loop every continuous pole p has a sampled eigenvalue
    within 1e-3 of exp(p T) (the z = e^{sT} map of sampling; the held torque shifts it by O((pT)^2))."""
    pytest.importorskip("pinocchio", reason="URDF chains need Pinocchio (the pin package)")
    paths = [str(config.bundled().parent / "compliant_leg.yaml")]
    ctrl = config.controller_setup(config.layered_parameters(paths, config.CONTROLLER_NODE))
    sim = config.sim_setup(config.layered_parameters(paths, config.SIM_NODE))
    from compliant_damping.control import controller
    from compliant_damping.sim import robot_sim
    law = make_law(ctrl.law, controller.chain_nominal(ctrl), controller.stack_gains([j.gains for j in ctrl.joints]))
    q_d = [j.initial_position for j in sim.joints]
    dt = 5e-5
    lin = robot_linear.linearize_robot(robot_sim.robot_plant(sim), law, q_d)
    res = sampled.analyze_robot(robot_sim.robot_plant(sim), law, q_d, control_dt=dt, substeps=1)
    _assert_same_eigenvalues(res.eigenvalues, np.exp(np.linalg.eigvals(lin.a) * dt), rel=1e-3)
    assert res.stable


def _step_envelope(cj, sj, kv):
    """Peak |q - q_d| (rad) of a 0.05 rad set-point step at 1 kHz in [0.3, 0.6), [1.0, 1.2) and [1.8, 2.0) s."""
    gains = dataclasses.replace(cj.gains, decoupling_stiffness=kv)
    raised = Limits(torque=1e5, torque_rate=1e8, deflection=10.0, driver_torque=math.inf)  # nothing trips
    ctrl = JointController("decoupled_damper", cj.model, gains, raised, period=T)
    run = simulate.simulate([sj], [ctrl], scenarios.make("setpoint_step", [sj]), control_dt=T, substeps=SUBSTEPS)
    assert ctrl.fault is None
    err = np.abs(run.q[:, 0] - 0.05)
    return [float(err[(run.t >= lo) & (run.t < hi)].max()) for lo, hi in ((0.3, 0.6), (1.0, 1.2), (1.8, 2.0))]


def test_decoupled_damper_boundary_at_1khz_matches_simulation(joint):
    """The sampled boundary in k_v at 1 kHz: 5 % below it a set-point step settles, 5 % above it the
    oscillation grows, at the rate |z|^800 over the 0.8 s between the last two windows (within 20 %)
    (sim/simulate.py; Coulomb friction off, as in the analysis, so that its smoothed stiction does not
    damp a small oscillation; driver saturation off so the growth stays linear)."""
    cj, sj = joint
    sj = dataclasses.replace(sj, plant=dataclasses.replace(sj.plant, motor_coulomb=0.0,
                                                           driver_torque_limit=math.inf))
    boundary = tuning.stability_boundary(cj, sj, 1000.0, 3000.0, control_dt=T, substeps=SUBSTEPS)
    assert 1500.0 < boundary < 2500.0  # measured 2.09e3 N m/rad; the continuous loop stays stable past 1e4
    assert linear.analyze(sj.plant, make_law("decoupled_damper", cj.model, dataclasses.replace(
        cj.gains, decoupling_stiffness=1.05 * boundary))).stable
    early, _, late = _step_envelope(cj, sj, 0.95 * boundary)
    assert late < 0.01 * early
    kv = 1.05 * boundary
    radius = sampled.analyze_joint(sj.plant, make_law("decoupled_damper", cj.model, dataclasses.replace(
        cj.gains, decoupling_stiffness=kv)), 0.0, control_dt=T, substeps=SUBSTEPS).spectral_radius
    early, middle, late = _step_envelope(cj, sj, kv)
    assert late > 5.0 * early
    assert late / middle == pytest.approx(radius ** 800, rel=0.2)


def test_the_leg_tolerates_one_tick_of_delay_and_not_two():
    """The bundled leg's decoupled_damper at 1 kHz: the sampled loop with the sensors' transport delay
    (analyze_robot's delay line) is stable with one tick (|z| = 0.991) and unstable with two (1.052).
    The offline robot simulator with the same delay (sim/sensors.SensorChannel) agrees: from a
    1e-7 rad spring deflection the motor speed dies out with 1 ms of delay and grows with 2 ms, by
    |z|^50 per 50 ticks within a factor 2 (motor Coulomb friction and the driver limit off, as in the
    analysis: the friction's smoothed stiction damps a small oscillation, the limit caps a large one,
    so with them the 2 ms loop ends in a 0.3 rad limit cycle after a 0.02 N m s impulse, measured)."""
    pytest.importorskip("pinocchio", reason="URDF chains need Pinocchio (the pin package)")
    from compliant_damping.control import controller
    from compliant_damping.control.controller import RobotController
    from compliant_damping.sim import robot_sim
    from compliant_damping.sim.sensors import SensorParams
    paths = [str(config.bundled().parent / "compliant_leg.yaml")]
    ctrl = config.controller_setup(config.layered_parameters(paths, config.CONTROLLER_NODE))
    sim = config.sim_setup(config.layered_parameters(paths, config.SIM_NODE))
    law = make_law(ctrl.law, controller.chain_nominal(ctrl), controller.stack_gains([j.gains for j in ctrl.joints]))
    q_d = scenarios.rest_state(sim.joints, sim.links)[:, 0]
    radius = {}
    for ticks in (1, 2):
        res = sampled.analyze_robot(robot_sim.robot_plant(sim), law, q_d, control_dt=T, substeps=sim.substeps,
                                    delays=[ticks] * 3)
        radius[ticks] = float(np.max(np.abs(res.eigenvalues)))
    assert radius[1] == pytest.approx(0.991, abs=5e-4) and radius[2] == pytest.approx(1.052, abs=5e-4)

    linear_sim = dataclasses.replace(sim, joints=tuple(
        dataclasses.replace(j, plant=dataclasses.replace(j.plant, motor_coulomb=0.0, driver_torque_limit=1e9))
        for j in sim.joints))
    raised = Limits(torque=1e9, torque_rate=1e12, deflection=10.0, driver_torque=1e9, link_speed=1e6,
                    motor_speed=1e6, position_lower=-10.0, position_upper=10.0)
    scenario = scenarios.make("free_oscillation", linear_sim.joints, links=linear_sim.links, deflection=1e-7)
    growth = {}
    for ticks in (1, 2):
        robot = RobotController(ctrl.law, controller.chain_nominal(ctrl), [j.gains for j in ctrl.joints],
                                [raised] * 3, ctrl.joint_names)
        run = robot_sim.simulate_robot(robot_sim.robot_plant(linear_sim, scenario), robot, scenario, 0.15,
                                       control_dt=T, substeps=sim.substeps, sensors=[SensorParams(delay=ticks * T)] * 3)
        speed = np.abs(run.dtheta).max(axis=1)
        window = lambda lo: speed[(run.t >= lo) & (run.t < lo + 0.05)].max()  # noqa: E731
        growth[ticks] = window(0.1) / window(0.05)
        assert robot.faults == [None] * 3
    print(f"leg with sensor delay: |z| {radius}; motor speed over 50 ticks x{growth} "
          f"(|z|^50: {radius[1] ** 50:.3g}, {radius[2] ** 50:.3g})")
    assert growth[1] < 1.0
    assert radius[2] ** 50 / 2 < growth[2] < 2 * radius[2] ** 50
