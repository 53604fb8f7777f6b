"""The laws on coupled links: one law code for the bench joint and for URDF chains.

References:

* the one-joint laws (laws.NominalModel, checked elsewhere against hand-derived polynomials and
  python-control) for the pendulum URDF, whose numbers are the bundled bench knee's: the chain
  path must give the same torques to round-off;
* the target closed loop of the structure-preserving transformation (design notes, section 4),
  integrated separately with scipy's solve_ivp:

      M(q) q'' + c(q, q') + g(q) = K (eta - q) + u1
      B eta''                    = K (q - eta) + u2,   u2 = g(q_d) - K_eta (eta - eta_d) - D_eta eta'

  which a coupled two-link arm with gravity must follow under ``link_damping`` (u1 = -D_l q')
  and ``decoupled_damper`` (u1 = -K_v (q - x), D_v x' = K_v (q - x)) with exact model knowledge.
"""
import dataclasses

import numpy as np
import pytest
from scipy.integrate import solve_ivp

pytest.importorskip("pinocchio", reason="URDF chains need Pinocchio (the pin package)")

from compliant_damping.io import config  # noqa: E402
from compliant_damping.control.controller import stack_gains  # noqa: E402
from compliant_damping.dynamics.elastic_chain import ElasticChain, ElasticElements  # noqa: E402
from compliant_damping.dynamics.links import IndependentLinks  # noqa: E402
from compliant_damping.dynamics.urdf_chain import UrdfChain, bundled_urdf  # noqa: E402
from compliant_damping.control.law_runner import LawRunner  # noqa: E402
from compliant_damping.control.laws import LAW_NAMES, ChainNominal, Gains, make_law  # noqa: E402
from compliant_damping.control.sample import JointSample, Reference  # noqa: E402

CTRL, SIM = config.load(config.bundled())
KNEE = CTRL.joints[0]
RNG = np.random.default_rng(7)


def _chain_nominal(links, n=1):
    return ChainNominal(links, np.full(n, KNEE.model.motor_inertia), np.full(n, KNEE.model.spring_stiffness))


def _vector(s: JointSample) -> JointSample:
    return JointSample(*(np.array([v]) for v in s))


def _vref(ref) -> Reference:
    return Reference(*(np.array([r]) for r in ref))


@pytest.mark.parametrize("law", LAW_NAMES)
@pytest.mark.parametrize("links", ["urdf", "independent"])
def test_one_joint_chain_gives_the_bench_torques(law, links):
    """Pendulum URDF (and IndependentLinks) with the knee's numbers: the same torque as the bench
    law at random states, references and damper states, and the same states after 50 ticks."""
    model = KNEE.model
    chain = (UrdfChain.from_file(bundled_urdf("pendulum.urdf"), ["knee"]) if links == "urdf" else
             IndependentLinks([model.link_inertia], [model.gravity_torque], [model.gravity_offset]))
    gains = dataclasses.replace(KNEE.gains, link_stiffness=40.0, motor_inertia_target=0.1)
    bench = make_law(law, model, gains)
    vector = make_law(law, _chain_nominal(chain), stack_gains([gains]))
    for _ in range(20):
        s = JointSample(*RNG.uniform(-0.5, 0.5, 4))
        ref = Reference(*RNG.uniform(-0.3, 0.3, 5))
        z = tuple(RNG.uniform(-0.5, 0.5, bench.n_states))
        out = vector.output(_vector(s), _vref(ref), tuple(np.array([v]) for v in z))
        assert out[0] == pytest.approx(bench.output(s, ref, z), rel=1e-10, abs=1e-10)
    ref0 = Reference(0.05)
    s = JointSample(0.1, 0.2, 0.12, -0.1)
    a = LawRunner(bench, s, ref0, previous_torque=1.5)
    b = LawRunner(vector, _vector(s), _vref(ref0), previous_torque=np.array([1.5]))
    for k in range(50):  # jittery ticks, a moving link: the damper states advance alike
        s_k = JointSample(0.1 + 1e-3 * k, 0.2, 0.12 + 5e-4 * k, -0.1)
        dt = 1e-3 * (1.0 + 0.3 * np.sin(k))
        assert b.step(_vector(s_k), _vref(ref0), dt)[0] == pytest.approx(a.step(s_k, ref0, dt), rel=1e-10, abs=1e-10)


def _arm():
    """The two-link test arm with gravity, its elastic elements and gains (invented numbers)."""
    links = UrdfChain.from_file(bundled_urdf("two_link_arm.urdf"), ["shoulder", "elbow"])
    B, K = np.array([0.2, 0.1]), np.array([400.0, 250.0])
    elements = ElasticElements.lossless(B, K)
    gains = [Gains(motor_stiffness=300.0, motor_damping=8.0, link_damping=4.0, decoupling_stiffness=150.0),
             Gains(motor_stiffness=200.0, motor_damping=5.0, link_damping=2.0, decoupling_stiffness=100.0)]
    return links, elements, stack_gains(gains), ChainNominal(links, B, K)


@pytest.mark.parametrize("law", ["link_damping", "decoupled_damper"])
def test_coupled_arm_follows_the_target_closed_loop(law):
    links, elements, gains, nominal = _arm()
    plant = ElasticChain(links, elements)
    control = make_law(law, nominal, gains)
    q_d = np.array([0.4, -0.3])
    ref = Reference(q_d, np.zeros(2), np.zeros(2))
    q0, dq0 = np.array([0.1, 0.2]), np.array([0.5, -0.4])
    theta0 = q0 + links.gravity(q0) / elements.spring_stiffness + np.array([0.01, -0.02])
    x0 = np.stack([q0, dq0, theta0, np.array([0.3, 0.1])], axis=1)
    s0 = JointSample(q0, dq0, theta0, x0[:, 3])
    z0 = control.initial_state(s0) if control.n_states else ()
    n, K, B = links.n, elements.spring_stiffness, elements.motor_inertia

    def closed_loop(t, y):
        x = y[:4 * n].reshape(4, n).T.copy()
        z = tuple(y[4 * n:].reshape(-1, n)) if control.n_states else ()
        s = JointSample(x[:, 0], x[:, 1], x[:, 2], x[:, 3])
        tau = control.output(s, ref, z)
        dx = plant.rates(x, tau, np.zeros(n))
        dz = np.concatenate(control.state_rate(s, ref, z)) if control.n_states else np.zeros(0)
        return np.concatenate([dx.T.ravel(), dz])

    # the target loop in (q, q', eta, eta', x): eta = theta - u1/K
    def u1_of(q, dq, x):
        return -gains.link_damping * dq if law == "link_damping" else -gains.decoupling_stiffness * (q - x)

    g_d = links.gravity(q_d)
    eta_d = q_d + g_d / K

    def target(t, y):
        q, dq, eta, deta = y[:n], y[n:2 * n], y[2 * n:3 * n], y[3 * n:4 * n]
        x = y[4 * n:] if law == "decoupled_damper" else q
        u1 = u1_of(q, dq, x)
        u2 = g_d - gains.motor_stiffness * (eta - eta_d) - gains.motor_damping * deta
        ddq = links.forward(q, dq, K * (eta - q) + u1)
        deta_dt = (K * (q - eta) + u2) / B
        dx = gains.decoupling_stiffness * (q - x) / gains.link_damping
        return np.concatenate([dq, ddq, deta, deta_dt] + ([dx] if law == "decoupled_damper" else []))

    y0 = np.concatenate([x0.T.ravel(), np.concatenate(z0) if control.n_states else np.zeros(0)])
    # eta and eta' at the start from the law's own u1 and u1' (the same definitions)
    x_state = z0[0] if control.n_states else q0
    u1 = u1_of(q0, dq0, x_state)
    ddq0 = links.forward(q0, dq0, K * (theta0 - q0))
    du1 = (-gains.link_damping * ddq0 if law == "link_damping" else
           -gains.decoupling_stiffness * (dq0 - gains.decoupling_stiffness * (q0 - x_state) / gains.link_damping))
    eta0, deta0 = theta0 - u1 / K, x0[:, 3] - du1 / K
    t_end = 3.0
    times = np.linspace(0.0, t_end, 301)
    tol = dict(method="DOP853", rtol=1e-12, atol=1e-13, t_eval=times)
    ours = solve_ivp(closed_loop, (0.0, t_end), y0, **tol)
    ref_y0 = np.concatenate([q0, dq0, eta0, deta0] + ([x_state] if law == "decoupled_damper" else []))
    theirs = solve_ivp(target, (0.0, t_end), ref_y0, **tol)
    q_ours = ours.y[:4 * n].reshape(4, n, -1)[0]
    q_target = theirs.y[:n]
    err = np.max(np.abs(q_ours - q_target))
    print(f"{law}: plant vs target closed loop, max |q error| {err:.2e} rad over {t_end} s; "
          f"final {q_ours[:, -1]} vs q_d {q_d}")
    assert err < 1e-8
    assert np.max(np.abs(q_ours[:, -1] - q_d)) < 2e-3  # and it settles at q_d
