"""Link-side rigid-body dynamics (compliant_damping.dynamics): URDF chains and independent links.

Outside references, named beside each check: the two-link planar arm equations of motion of
Spong, Hutchinson and Vidyasagar, "Robot Modeling and Control" (Wiley 2006), chapter 7 (the
planar elbow manipulator; equations written from memory), its forward kinematics (chapter 3),
the bench knee of config/one_joint.yaml, finite differences along noise-free smooth signals
(central-difference coefficients from Fornberg 1988), scipy's solve_ivp (DOP853) with energy
conservation of a free rigid chain, and Pinocchio's RNEA derivatives (an algorithm other than the
ABA derivatives under test).
"""
import math
import re
import subprocess
import sys
from pathlib import Path

import numpy as np
import pytest
from scipy.integrate import solve_ivp

from compliant_damping.io import config
from compliant_damping.dynamics import bundled_urdf, IndependentLinks, LinkDynamics, RobotModelError, UrdfChain

pin = pytest.importorskip("pinocchio")  # pinned in requirements-common.txt; only a bare install lacks it

ARM = bundled_urdf("two_link_arm.urdf")
LEG = bundled_urdf("compliant_leg.urdf")
ARM_JOINTS = ["shoulder", "elbow"]
LEG_JOINTS = ["hip_pitch", "knee_pitch", "ankle_pitch"]
# two_link_arm.urdf's numbers (its header comment): lengths, masses, centre-of-mass distances, I about y
L1, L2, M1, M2, LC1, LC2, I1, I2 = 0.5, 0.4, 1.2, 0.75, 0.25, 0.2, 0.02525, 0.01015625
G0 = 9.81
RNG = np.random.default_rng(9)
# 8th-order central difference of a first derivative, offsets -4..4 (Fornberg 1988, table 1)
D1_8 = np.array([1 / 280, -4 / 105, 1 / 5, -4 / 5, 0.0, 4 / 5, -1 / 5, 4 / 105, -1 / 280])
OFFSETS = np.arange(-4, 5)


def central_diff(f, x, h):
    """d f / d x at x by the 8th-order central difference (columns: one per component of x)."""
    x = np.asarray(x, dtype=float)
    cols = []
    for i in range(x.size):
        step = np.zeros_like(x)
        step[i] = h
        cols.append(sum(c * np.asarray(f(x + k * step)) for c, k in zip(D1_8, OFFSETS) if c) / h)
    return np.stack(cols, axis=-1)


def states(n, count=20):
    for _ in range(count):
        yield RNG.uniform(-math.pi, math.pi, n), RNG.uniform(-4.0, 4.0, n), RNG.uniform(-20.0, 20.0, n)


def textbook_arm(q, dq):
    """M, c and g of the planar elbow arm (Spong, Hutchinson, Vidyasagar 2006, ch. 7), angles
    from the horizontal, gravity g0 down in the plane of motion."""
    c2, s2 = math.cos(q[1]), math.sin(q[1])
    d11 = M1 * LC1**2 + M2 * (L1**2 + LC2**2 + 2 * L1 * LC2 * c2) + I1 + I2
    d12 = M2 * (LC2**2 + L1 * LC2 * c2) + I2
    d22 = M2 * LC2**2 + I2
    h = -M2 * L1 * LC2 * s2
    c = np.array([2 * h * dq[0] * dq[1] + h * dq[1] ** 2, -h * dq[0] ** 2])
    g = np.array([(M1 * LC1 + M2 * L1) * G0 * math.cos(q[0]) + M2 * LC2 * G0 * math.cos(q[0] + q[1]),
                  M2 * LC2 * G0 * math.cos(q[0] + q[1])])
    return np.array([[d11, d12], [d12, d22]]), c, g


@pytest.fixture(scope="module")
def arm():
    return UrdfChain.from_file(ARM, ARM_JOINTS)


@pytest.fixture(scope="module")
def leg():
    return UrdfChain.from_file(LEG, LEG_JOINTS)


def test_two_link_arm_matches_the_textbook_equations(arm):
    """M(q), c(q, q'), g(q) of two_link_arm.urdf = Spong et al. (2006) ch. 7, planar elbow arm."""
    worst = 0.0
    for q, dq, _ in states(2, 50):
        m_ref, c_ref, g_ref = textbook_arm(q, dq)
        for got, want in ((arm.mass_matrix(q), m_ref), (arm.coriolis(q, dq), c_ref), (arm.gravity(q), g_ref)):
            np.testing.assert_allclose(got, want, rtol=0, atol=1e-12)
            worst = max(worst, float(np.max(np.abs(got - want))))
    print(f"two-link arm vs textbook: max |error| {worst:.2e}")


def test_pendulum_urdf_equals_the_bench_knee():
    """pendulum.urdf through Pinocchio = IndependentLinks with the bench knee of one_joint.yaml."""
    ctrl, _ = config.load(config.bundled())
    knee = ctrl.joints[0]
    bench = IndependentLinks.from_params([knee.name], [knee.model])
    chain = UrdfChain.from_file(bundled_urdf("pendulum.urdf"), [knee.name])
    assert (bench.inertia[0], bench.gravity_torque[0]) == (0.25, 2.0)  # the numbers the URDF was made for
    worst = 0.0
    for q, dq, tau in states(1, 50):
        dtau = RNG.uniform(-100.0, 100.0, 1)
        pairs = [(chain.mass_matrix(q), bench.mass_matrix(q)), (chain.gravity(q), bench.gravity(q)),
                 (chain.gravity_jacobian(q), bench.gravity_jacobian(q)),
                 (chain.forward(q, dq, tau), bench.forward(q, dq, tau)),
                 (chain.inverse(q, dq, tau), bench.inverse(q, dq, tau)),
                 (chain.jerk(q, dq, tau, dtau), bench.jerk(q, dq, tau, dtau)),
                 (chain.kinetic_energy(q, dq), bench.kinetic_energy(q, dq)),
                 (chain.potential_energy(q), bench.potential_energy(q))]
        for got, want in pairs:
            np.testing.assert_allclose(got, want, rtol=0, atol=1e-12)
            worst = max(worst, float(np.max(np.abs(np.asarray(got) - want))))
    print(f"pendulum.urdf vs IndependentLinks: max |error| {worst:.2e}")


def test_independent_links_closed_forms():
    """IndependentLinks: M q'' + g = tau by hand for g = m g0 l sin(q + q_off); its closed-form jerk
    equals the interface's generic formula from the partial derivatives."""
    links = IndependentLinks([0.25, 0.5], [2.0, 0.0], [0.1, -0.3], ["a", "b"])
    q, dq, tau, dtau = np.array([0.4, -1.0]), np.array([1.5, 2.0]), np.array([3.0, -1.0]), np.array([10.0, 5.0])
    np.testing.assert_allclose(links.forward(q, dq, tau), [(3.0 - 2.0 * math.sin(0.5)) / 0.25, -1.0 / 0.5],
                               rtol=1e-15)
    np.testing.assert_allclose(links.jerk(q, dq, tau, dtau), LinkDynamics.jerk(links, q, dq, tau, dtau), rtol=1e-14)
    np.testing.assert_allclose(links.jerk(q, dq, tau, dtau),
                               [(10.0 - 2.0 * math.cos(0.5) * 1.5) / 0.25, 5.0 / 0.5], rtol=1e-14)
    with pytest.raises(RobotModelError, match="inertia: must be positive"):
        IndependentLinks([0.25, 0.0], [1.0, 1.0], [0.0, 0.0])
    with pytest.raises(RobotModelError, match="gravity_offset: expected one value per joint"):
        IndependentLinks([0.25, 0.5], [1.0, 1.0], [0.0])


def smooth_motion(t, n):
    """q, q', q'', q''' of q_i = 0.3 + 0.6 sin(w_i t + p_i): analytic, noise-free."""
    w, p = 1.7 + 0.9 * np.arange(n), 0.4 + 0.5 * np.arange(n)
    s, c = np.sin(w * t + p), np.cos(w * t + p)
    return 0.3 + 0.6 * s, 0.6 * w * c, -0.6 * w**2 * s, -0.6 * w**3 * c


@pytest.mark.parametrize("path,joints", [(ARM, ARM_JOINTS), (LEG, LEG_JOINTS)], ids=["arm", "leg"])
def test_jerk_equals_the_derivative_of_the_model_acceleration(path, joints):
    """Along a motion the dynamics produce, jerk(q, q', tau, tau') = d/dt FD(q, q', tau): checked
    against the 8th-order central difference of FD along the noise-free trajectory (h = 2 ms) and
    against the analytic q''' of that trajectory. The torque that produces it is tau = ID(q, q', q'')
    and its rate tau' = dID/dq q' + dID/dq' q'' + M q''' (Pinocchio's RNEA derivatives)."""
    chain = UrdfChain.from_file(path, joints)
    model = pin.buildModelFromUrdf(str(path))  # tree order = the names' order for these files
    data = model.createData()

    def torque(t):
        q, dq, ddq, _ = smooth_motion(t, chain.n)
        return pin.rnea(model, data, q, dq, ddq).copy()

    def model_acceleration(t):
        q, dq, _, _ = smooth_motion(t, chain.n)
        return chain.forward(q, dq, torque(t))

    worst_fd = worst_exact = 0.0
    h = 2e-3
    for t in np.linspace(0.0, 2.0, 9):
        q, dq, ddq, dddq = smooth_motion(t, chain.n)
        did_dq, did_dv, _ = pin.computeRNEADerivatives(model, data, q, dq, ddq)
        dtau = did_dq @ dq + did_dv @ ddq + chain.mass_matrix(q) @ dddq
        jerk = chain.jerk(q, dq, torque(t), dtau)
        fd = sum(c * model_acceleration(t + k * h) for c, k in zip(D1_8, OFFSETS) if c) / h
        scale = np.max(np.abs(dddq))
        worst_fd = max(worst_fd, float(np.max(np.abs(jerk - fd))) / scale)
        worst_exact = max(worst_exact, float(np.max(np.abs(jerk - dddq))) / scale)
    print(f"{path.name}: jerk vs 8th-order difference {worst_fd:.2e}, vs analytic q''' {worst_exact:.2e} (relative)")
    assert worst_fd < 1e-9 and worst_exact < 1e-9


@pytest.mark.parametrize("path,joints", [(ARM, ARM_JOINTS), (LEG, LEG_JOINTS)], ids=["arm", "leg"])
def test_partial_derivatives_and_inverse_forward_round_trip(path, joints):
    """forward(inverse(q, q', q'')) = q''; inverse = M q'' + c + g; M^-1 M = I; the partials of FD
    and dg/dq equal 8th-order central differences (smooth, noise-free functions of the state)."""
    chain = UrdfChain.from_file(path, joints)
    worst = {"round trip": 0.0, "partials": 0.0}
    for q, dq, ddq in states(chain.n, 10):
        tau = chain.inverse(q, dq, ddq)
        np.testing.assert_allclose(tau, chain.mass_matrix(q) @ ddq + chain.coriolis(q, dq) + chain.gravity(q),
                                   rtol=1e-12, atol=1e-11)
        err = np.max(np.abs(chain.forward(q, dq, tau) - ddq)) / np.max(np.abs(ddq))
        worst["round trip"] = max(worst["round trip"], float(err))
        d = chain.forward_derivatives(q, dq, tau)
        np.testing.assert_allclose(d.minv @ chain.mass_matrix(q), np.eye(chain.n), atol=1e-12)
        np.testing.assert_allclose(d.ddq, ddq, rtol=1e-10, atol=1e-10)
        for got, want in ((d.ddq_dq, central_diff(lambda x: chain.forward(x, dq, tau), q, 1e-3)),
                          (d.ddq_dv, central_diff(lambda x: chain.forward(q, x, tau), dq, 1e-3)),
                          (chain.gravity_jacobian(q), central_diff(chain.gravity, q, 1e-3)),
                          (chain.gravity(q), central_diff(chain.potential_energy, q, 1e-3))):
            rel = np.max(np.abs(got - want)) / max(np.max(np.abs(want)), 1.0)
            worst["partials"] = max(worst["partials"], float(rel))
    print(f"{path.name}: {worst}")
    assert worst["round trip"] < 1e-12 and worst["partials"] < 1e-8


@pytest.mark.parametrize("path,joints", [(ARM, ARM_JOINTS), (LEG, LEG_JOINTS)], ids=["arm", "leg"])
def test_free_chain_conserves_energy(path, joints):
    """A free rigid chain (tau = 0) keeps kinetic + potential energy: scipy solve_ivp (DOP853,
    rtol = atol = 1e-13) over 2 s, drift relative to the largest kinetic energy of the run."""
    chain = UrdfChain.from_file(path, joints)
    n = chain.n
    zero = np.zeros(n)
    sol = solve_ivp(lambda _t, x: np.concatenate([x[n:], chain.forward(x[:n], x[n:], zero)]), (0.0, 2.0),
                    np.concatenate([np.full(n, 0.8), np.full(n, -1.5)]), method="DOP853", rtol=1e-13,
                    atol=1e-13, dense_output=True)
    assert sol.success
    x = sol.sol(np.linspace(0.0, 2.0, 401)).T
    kinetic = np.array([chain.kinetic_energy(s[:n], s[n:]) for s in x])
    total = kinetic + np.array([chain.potential_energy(s[:n]) for s in x])
    drift = float(np.max(np.abs(total - total[0])) / np.max(kinetic))
    print(f"{path.name}: energy drift {drift:.2e} of the largest kinetic energy {np.max(kinetic):.2f} J")
    assert np.ptp(kinetic) > 1.0  # the chain really swings: energy moves between the two kinds
    assert drift < 1e-8


def test_frame_position_and_jacobian(arm, leg):
    """Tip position = planar forward kinematics l1 c1 + l2 c12, l1 s1 + l2 s12 (Spong et al. 2006,
    ch. 3) in the x-z plane; linear Jacobian rows = 8th-order differences of frame_position; angular
    rows = the common axis -y (planar chain: the angular velocity is the sum of the joint rates)."""
    worst = 0.0
    for chain, frame in ((arm, "tip"), (leg, "foot")):
        for q, _, _ in states(chain.n, 10):
            jac = chain.frame_jacobian(frame, q)
            fd = central_diff(lambda x: chain.frame_position(frame, x), q, 1e-3)
            np.testing.assert_allclose(jac[:3], fd, atol=1e-9)
            worst = max(worst, float(np.max(np.abs(jac[:3] - fd))))
            axis = [0.0, -1.0, 0.0] if chain is arm else [0.0, 1.0, 0.0]
            np.testing.assert_allclose(jac[3:], np.tile(np.array(axis)[:, None], chain.n), atol=1e-15)
    q = np.array([0.7, -1.2])
    np.testing.assert_allclose(arm.frame_position("tip", q), [L1 * math.cos(0.7) + L2 * math.cos(-0.5), 0.0,
                                                              L1 * math.sin(0.7) + L2 * math.sin(-0.5)], atol=1e-15)
    # straight leg: sole 1.0 - 0.40 - 0.40 - 0.085 m above the floor, 0.04 m ahead (compliant_leg.urdf)
    np.testing.assert_allclose(leg.frame_position("foot", np.zeros(3)), [0.04, 0.0, 0.115], atol=1e-15)
    print(f"frame Jacobians vs differences: max |error| {worst:.2e}")
    with pytest.raises(RobotModelError, match="toe: no such frame"):
        leg.frame_position("toe", np.zeros(3))


def test_joint_order_is_the_order_of_the_names(leg):
    """Names given in another order permute every vector and matrix the same way."""
    order = [2, 0, 1]
    shuffled = UrdfChain.from_file(LEG, [LEG_JOINTS[i] for i in order])
    q, dq, tau = np.array([0.3, 0.9, -0.2]), np.array([1.0, -2.0, 0.5]), np.array([5.0, -3.0, 1.0])
    ix = np.ix_(order, order)
    np.testing.assert_allclose(shuffled.mass_matrix(q[order]), leg.mass_matrix(q)[ix], rtol=1e-14)
    np.testing.assert_allclose(shuffled.forward(q[order], dq[order], tau[order]), leg.forward(q, dq, tau)[order],
                               rtol=1e-12)
    d, d0 = shuffled.forward_derivatives(q[order], dq[order], tau[order]), leg.forward_derivatives(q, dq, tau)
    np.testing.assert_allclose(d.ddq_dq, d0.ddq_dq[ix], rtol=1e-12)
    np.testing.assert_allclose(shuffled.frame_jacobian("foot", q[order]), leg.frame_jacobian("foot", q)[:, order],
                               rtol=1e-14)
    assert shuffled.joint_names == ("ankle_pitch", "hip_pitch", "knee_pitch")


def test_gravity_is_settable():
    """Gravity scales g(q) linearly and leaves M(q) alone (the URDF world's -z)."""
    moon = UrdfChain.from_file(ARM, ARM_JOINTS, gravity=1.62)
    earth = UrdfChain.from_file(ARM, ARM_JOINTS)
    q = np.array([0.2, 0.5])
    np.testing.assert_allclose(moon.gravity(q), earth.gravity(q) * 1.62 / 9.81, rtol=1e-14)
    np.testing.assert_allclose(moon.gravity_vector, [0.0, 0.0, -1.62])
    with pytest.raises(RobotModelError, match="gravity: must be finite and nonnegative"):
        UrdfChain.from_file(ARM, ARM_JOINTS, gravity=-9.81)


def test_robot_description_errors_name_the_item():
    """Each bad description names the joint, link or source and says why."""
    text = ARM.read_text()
    cases = [
        (text, ["shoulder"], "elbow", "revolute joint not listed as elastic"),
        (text, ["shoulder", "elbow", "wrist"], "wrist", "no such joint"),
        (text, ["shoulder", "tip_mount", "elbow"], "tip_mount", "a fixed joint cannot be elastic"),
        (text, ["shoulder", "shoulder", "elbow"], "shoulder", "named twice"),
        (text[: len(text) // 2], ARM_JOINTS, "robot_description", "not a well-formed URDF (XML error"),
        ("<sdf version='1.7'/>", ARM_JOINTS, "robot_description", "the root element is <sdf>"),
        (re.sub(r'<link name="forearm">.*?</link>', '<link name="forearm"/>', text, flags=re.S), ARM_JOINTS,
         "forearm", "link moved by joint elbow has no inertia"),
        (text.replace('<origin xyz="0.2 0 0" rpy="0 0 0"/>', '<origin xyz="0 0 0" rpy="0 0 0"/>')
         .replace('ixx="0.0003125" ixy="0" ixz="0" iyy="0.01015625" iyz="0" izz="0.01015625"',
                  'ixx="0" ixy="0" ixz="0" iyy="0" iyz="0" izz="0"'), ARM_JOINTS, "robot_description",
         "singular at q = 0"),  # a point mass on the elbow axis: nothing resists the elbow
        (text.replace('<child link="forearm"/>', '<child link="hand"/>'), ARM_JOINTS, "elbow",
         "joint without a declared child link"),
        (text.replace("<limit lower=\"-3.14\" upper=\"3.14\" effort=\"40.0\" velocity=\"8.0\"/>", "", 1),
         ARM_JOINTS, "shoulder", "revolute joint without <limit>"),
        (text.replace('type="revolute"', 'type="continuous"', 1), ARM_JOINTS, "shoulder",
         "a continuous joint cannot be elastic"),
    ]
    for xml, joints, key, reason in cases:
        with pytest.raises(RobotModelError) as info:
            UrdfChain(xml, joints)
        assert info.value.key == key and reason in info.value.reason, (key, reason, str(info.value))
    with pytest.raises(RobotModelError, match="nowhere.urdf: cannot read the URDF"):
        UrdfChain.from_file(Path("/nonexistent/nowhere.urdf"), ARM_JOINTS)


WITHOUT_PINOCCHIO = """
import sys

class NoPinocchio:
    def find_spec(self, name, path=None, target=None):
        if name.split(".")[0] == "pinocchio":
            raise ImportError(f"blocked for this test: {name}")
        return None

sys.meta_path.insert(0, NoPinocchio())
from compliant_damping.dynamics import bundled_urdf, IndependentLinks, UrdfChain
print(IndependentLinks([0.25], [2.0], [0.0]).forward([0.5], [0.0], [1.0])[0])
try:
    UrdfChain.from_file(bundled_urdf("pendulum.urdf"), ["knee"])
except ImportError as err:
    print(err)
print("pinocchio" in sys.modules)
"""


def test_independent_links_need_no_pinocchio():
    """With Pinocchio unimportable, IndependentLinks runs ((1 - 2 sin 0.5) / 0.25 by hand) and
    building a UrdfChain says what to install."""
    out = subprocess.run([sys.executable, "-c", WITHOUT_PINOCCHIO], capture_output=True, text=True, timeout=60,
                         cwd=Path(__file__).resolve().parent.parent)
    assert out.returncode == 0, out.stderr
    ddq, message, loaded = out.stdout.strip().splitlines()
    assert float(ddq) == pytest.approx((1.0 - 2.0 * math.sin(0.5)) / 0.25, rel=1e-15)
    assert "UrdfChain needs Pinocchio: pip install pin==4.1.0" in message
    assert loaded == "False"
