"""Parameter files that describe a URDF robot: the keys, ``cdamp check-config`` and the robot
section's refusals, each naming the key and the reason.

Outside references: the URDF format (ROS wiki, "urdf/XML"): a link's ``<inertial>`` gives its
mass, centre of mass and inertia, which is why a file with a URDF has no per-joint link keys,
and only revolute joints rotate about one axis within limits; the ament index's own lookup
(``ament_index_python``) for other packages; the two-link arm's mass matrix against Pinocchio's
own URDF reader and CRBA, and against the planar two-link arm of Spong, Hutchinson and
Vidyasagar, "Robot Modeling and Control" (2006), eq. 7.87 (from memory).
"""
import copy
import math
from pathlib import Path

import numpy as np
import pytest
import yaml

from compliant_damping import cli
from compliant_damping.io import config
from compliant_damping.io.config import CONTROLLER_NODE, SIM_NODE, ConfigError
from compliant_damping.dynamics.urdf_chain import UrdfChain, bundled_urdf
from compliant_damping.sim import scenarios

REPO_URDF = Path(__file__).resolve().parent.parent / "urdf"  # the bundled files, found without the package

ARM_URI = "package://compliant_damping/urdf/two_link_arm.urdf"
JOINTS = ["shoulder", "elbow"]
# The pendulum link's keys of a built-in joint (model.LINK_KEYS), all given by a URDF <inertial>.
LINK_KEYS = ("link_inertia", "gravity_torque", "gravity_offset")


def _drive(motor_inertia, stiffness):
    return {"motor_inertia": motor_inertia, "spring_stiffness": stiffness}


ROBOT = {
    f"/**/{CONTROLLER_NODE}": {"ros__parameters": {
        "joint_names": JOINTS,
        "law": "decoupled_damper",
        "nominal_urdf": ARM_URI,
        "shoulder": {"model": _drive(0.1, 400.0),
                     "gains": {"motor_stiffness": 300.0, "motor_damping": 10.0, "link_damping": 5.0},
                     "limits": {"torque": 40.0, "torque_rate": 10000.0, "deflection": 0.2}},
        "elbow": {"model": _drive(0.05, 300.0),
                  "gains": {"motor_stiffness": 200.0, "motor_damping": 8.0, "link_damping": 4.0},
                  "limits": {"torque": 30.0, "torque_rate": 10000.0, "deflection": 0.2}},
    }},
    f"/**/{SIM_NODE}": {"ros__parameters": {
        "joint_names": JOINTS,
        "robot_urdf": ARM_URI,
        "shoulder": {**_drive(0.1, 400.0), "stop_lower": -2.0, "stop_upper": 2.0},
        "elbow": {**_drive(0.05, 300.0), "stop_lower": -2.0, "stop_upper": 2.0},
    }},
}


def _section(doc, node):
    return doc[f"/**/{node}"]["ros__parameters"]


def _file(tmp_path, change=None, name="robot.yaml"):
    """Path of the robot file after ``change(document)`` (in place), written under ``tmp_path``."""
    doc = copy.deepcopy(ROBOT)
    if change is not None:
        change(doc)
    path = tmp_path / name
    path.write_text(yaml.safe_dump(doc))
    return str(path)


@pytest.fixture
def pin():
    return pytest.importorskip("pinocchio", reason="URDF chains are built with Pinocchio (pip install pin)")


def _listed_keys(out: str) -> dict:
    """{node: (header line, [key, ...])} of the ``cdamp keys`` table."""
    sections, node = {}, None
    for line in out.splitlines():
        if not line.startswith(" "):
            node = line.split(":", 1)[0]
            sections[node] = (line, [])
        else:
            sections[node][1].append(line.split()[0])
    return sections


def test_keys_of_a_robot_file_are_the_drives_for_each_node(tmp_path, capsys):
    assert cli.main(["keys", "--config", _file(tmp_path)]) == 0
    listed = _listed_keys(capsys.readouterr().out)
    for node, drive in ((CONTROLLER_NODE, "{joint}.model.spring_stiffness"), (SIM_NODE, "{joint}.spring_stiffness")):
        header, keys = listed[node]
        assert "URDF" in header
        for joint in JOINTS:
            assert drive.format(joint=joint) in keys
        assert [k for k in keys if k.rsplit(".", 1)[-1] in LINK_KEYS] == []
    assert "contact.frame" in listed[SIM_NODE][1]


def test_keys_follow_each_section_separately(tmp_path, capsys):
    """Only the simulated robot is a URDF here: the controller keeps its built-in pendulum model."""
    def builtin_controller(doc):
        ctrl = _section(doc, CONTROLLER_NODE)
        del ctrl["nominal_urdf"]
        for joint in JOINTS:
            ctrl[joint]["model"].update(link_inertia=0.05, gravity_torque=1.0)
    assert cli.main(["keys", "--config", _file(tmp_path, builtin_controller)]) == 0
    listed = _listed_keys(capsys.readouterr().out)
    ctrl_header, ctrl_keys = listed[CONTROLLER_NODE]
    sim_header, sim_keys = listed[SIM_NODE]
    assert "URDF" not in ctrl_header and "URDF" in sim_header
    assert {f"{j}.model.{k}" for j in JOINTS for k in LINK_KEYS} <= set(ctrl_keys)
    assert not {f"{j}.{k}" for j in JOINTS for k in LINK_KEYS} & set(sim_keys)


def test_keys_of_the_bundled_bench_file_keep_the_link_keys(capsys):
    assert cli.main(["keys"]) == 0
    listed = _listed_keys(capsys.readouterr().out)
    assert "URDF" not in listed[CONTROLLER_NODE][0]
    assert {f"knee.model.{k}" for k in LINK_KEYS} <= set(listed[CONTROLLER_NODE][1])
    assert {f"knee.{k}" for k in LINK_KEYS} <= set(listed[SIM_NODE][1])


def test_check_config_accepts_the_robot_file(tmp_path, capsys, pin):
    path = _file(tmp_path)
    assert cli.main(["check-config", path]) == 0
    assert capsys.readouterr().out.strip() == f"{path}: OK"


def test_check_config_lists_every_problem_of_a_robot_file(tmp_path, capsys, pin):
    def two_problems(doc):
        _section(doc, CONTROLLER_NODE)["elbow"]["model"]["spring_stiffness"] = -1.0
        _section(doc, SIM_NODE)["shoulder"]["link_inertia"] = 0.2
    assert cli.main(["check-config", _file(tmp_path, two_problems)]) == 1
    lines = capsys.readouterr().out.splitlines()
    assert len(lines) == 2
    assert lines[0].startswith(f"{CONTROLLER_NODE}.elbow.model.spring_stiffness: must be a finite value above zero")
    assert lines[1].startswith(f"{SIM_NODE}.shoulder.link_inertia: the URDF gives the links")


# --- the robot section's refusals: key and reason -------------------------------------------------

URDF_KEY = {CONTROLLER_NODE: "nominal_urdf", SIM_NODE: "robot_urdf"}
BOTH_NODES = pytest.mark.parametrize("node", [CONTROLLER_NODE, SIM_NODE])


def _refusal(tmp_path, node, change) -> ConfigError:
    """The one problem of ``node``'s section of the robot file after ``change(document)``."""
    check = config.controller_check if node == CONTROLLER_NODE else config.sim_check
    problems = check(config.layered_parameters([_file(tmp_path, change)], node)).problems
    assert len(problems) == 1, problems  # the robot file is valid but for the change
    return problems[0]


def _arm_variant(tmp_path, old: str, new: str) -> str:
    """Path of a copy of the two-link arm URDF with ``old`` (present once) replaced by ``new``."""
    text = (REPO_URDF / "two_link_arm.urdf").read_text()
    assert text.count(old) == 1
    path = tmp_path / "arm_variant.urdf"
    path.write_text(text.replace(old, new))
    return str(path)


def _set(node, **values):
    """A change setting top-level keys of ``node``'s section."""
    return lambda doc: _section(doc, node).update(values)


@BOTH_NODES
def test_a_urdf_that_does_not_parse(tmp_path, node):
    broken = _arm_variant(tmp_path, "</robot>", "</robt>")
    err = _refusal(tmp_path, node, _set(node, **{URDF_KEY[node]: broken}))
    assert err.key == URDF_KEY[node]
    assert broken in err.reason and "not a well-formed URDF" in err.reason


@BOTH_NODES
def test_a_robot_description_that_does_not_parse(tmp_path, node):
    def as_text(doc):
        params = _section(doc, node)
        del params[URDF_KEY[node]]
        params["robot_description"] = "<robot name='arm'><link name='base'></robot>"
    err = _refusal(tmp_path, node, as_text)
    assert err.key == "robot_description" and "not a well-formed URDF" in err.reason


@BOTH_NODES
def test_a_urdf_file_that_cannot_be_read(tmp_path, node):
    missing = str(tmp_path / "no_such.urdf")
    err = _refusal(tmp_path, node, _set(node, **{URDF_KEY[node]: missing}))
    assert err.key == URDF_KEY[node] and "cannot read the URDF" in err.reason and missing in err.reason


@BOTH_NODES
def test_a_joint_the_urdf_does_not_have(tmp_path, node):
    def rename_elbow(doc):
        params = _section(doc, node)
        params["joint_names"] = ["shoulder", "wrist"]
        params["wrist"] = params.pop("elbow")
    err = _refusal(tmp_path, node, rename_elbow)
    assert err.key == URDF_KEY[node]
    assert err.reason.startswith("wrist: no such joint")
    assert "shoulder, elbow" in err.reason  # the joints the URDF has


@BOTH_NODES
def test_a_joint_whose_child_link_has_no_inertia(tmp_path, node, pin):
    massless = _arm_variant(tmp_path, """    <inertial>
      <origin xyz="0.2 0 0" rpy="0 0 0"/>
      <mass value="0.75"/>
      <inertia ixx="0.0003125" ixy="0" ixz="0" iyy="0.01015625" iyz="0" izz="0.01015625"/>
    </inertial>
""", "")
    err = _refusal(tmp_path, node, _set(node, **{URDF_KEY[node]: massless}))
    assert err.key == URDF_KEY[node]
    assert err.reason.startswith("forearm: link moved by joint elbow has no inertia")


@BOTH_NODES
def test_a_prismatic_joint_cannot_be_elastic(tmp_path, node):
    sliding = _arm_variant(tmp_path, '<joint name="elbow" type="revolute">', '<joint name="elbow" type="prismatic">')
    err = _refusal(tmp_path, node, _set(node, **{URDF_KEY[node]: sliding}))
    assert err.key == URDF_KEY[node]
    assert err.reason.startswith("elbow: a prismatic joint cannot be elastic") and "revolute" in err.reason


@BOTH_NODES
def test_a_file_and_a_description_both_set(tmp_path, node):
    text = (REPO_URDF / "two_link_arm.urdf").read_text()
    err = _refusal(tmp_path, node, _set(node, robot_description=text))
    assert err.key == "robot_description"
    assert URDF_KEY[node] in err.reason and "not both" in err.reason


def test_the_package_uri_resolves_to_the_bundled_leg(tmp_path, pin):
    leg = ["hip_pitch", "knee_pitch", "ankle_pitch"]

    def leg_robot(doc):
        params = _section(doc, SIM_NODE)
        del params["shoulder"], params["elbow"]
        params.update({"joint_names": leg, "robot_urdf": "package://compliant_damping/urdf/compliant_leg.urdf",
                       "contact": {"frame": "foot"}})
        params.update({j: _drive(0.2, 800.0) for j in leg})
    setup = config.sim_check(config.layered_parameters([_file(tmp_path, leg_robot)], SIM_NODE)).setup
    assert Path(setup.urdf_source).read_text() == (REPO_URDF / "compliant_leg.urdf").read_text()
    assert setup.links.joint_names == tuple(leg) and setup.contact.frame == "foot"


@pytest.mark.parametrize("ament_prefix", [None, "empty index"])
def test_an_unknown_package(tmp_path, monkeypatch, ament_prefix):
    """Without an ament index (AMENT_PREFIX_PATH unset) and with one that lacks the package."""
    pytest.importorskip("ament_index_python", reason="the ament index is searched through ament_index_python")
    if ament_prefix is None:
        monkeypatch.delenv("AMENT_PREFIX_PATH", raising=False)
    else:
        monkeypatch.setenv("AMENT_PREFIX_PATH", str(tmp_path))
    uri = "package://no_such_robot_pkg/urdf/arm.urdf"
    err = _refusal(tmp_path, SIM_NODE, _set(SIM_NODE, robot_urdf=uri))
    assert err.key == "robot_urdf"
    assert uri in err.reason and "'no_such_robot_pkg'" in err.reason and "ament index" in err.reason


def test_a_package_uri_without_a_path(tmp_path):
    err = _refusal(tmp_path, CONTROLLER_NODE, _set(CONTROLLER_NODE, nominal_urdf="package://compliant_damping"))
    assert err.key == "nominal_urdf" and "expected package://PACKAGE/PATH" in err.reason


@pytest.mark.parametrize("node, prefix", [(CONTROLLER_NODE, "shoulder.model."), (SIM_NODE, "shoulder.")])
@pytest.mark.parametrize("link_key", LINK_KEYS)
def test_a_link_key_beside_a_urdf(tmp_path, node, prefix, link_key):
    def add(doc):
        section = _section(doc, node)["shoulder"]
        (section["model"] if node == CONTROLLER_NODE else section)[link_key] = 0.3
    err = _refusal(tmp_path, node, add)
    assert err.key == f"{prefix}{link_key}"
    assert "the URDF gives the links" in err.reason and node in err.reason


def test_a_misspelt_drive_key_beside_a_urdf_names_the_drive_key(tmp_path):
    """The did-you-mean of a robot section comes from its own keys (difflib.get_close_matches)."""
    err = _refusal(tmp_path, SIM_NODE, lambda doc: _section(doc, SIM_NODE)["shoulder"].update(motor_inertai=0.1))
    assert err.key == "shoulder.motor_inertai" and "did you mean shoulder.motor_inertia?" in err.reason


def test_a_contact_frame_the_urdf_does_not_have(tmp_path, pin):
    err = _refusal(tmp_path, SIM_NODE, _set(SIM_NODE, contact={"frame": "toe"}))
    assert err.key == "contact.frame"
    assert "no frame 'toe'" in err.reason and str(bundled_urdf("two_link_arm.urdf")) in err.reason


def test_a_contact_frame_without_a_urdf(tmp_path):
    doc = config.read(config.bundled())
    _section(doc, SIM_NODE)["contact"] = {"frame": "foot"}
    path = tmp_path / "bench_with_floor.yaml"
    path.write_text(yaml.safe_dump(doc))
    problems = config.sim_check(config.layered_parameters([path], SIM_NODE)).problems
    assert [p.key for p in problems] == ["contact.frame"]
    assert "URDF" in problems[0].reason and "robot_urdf" in problems[0].reason


def test_the_setups_links_are_the_urdf_chain_of_the_file(tmp_path, pin):
    ctrl, sim = config.load(_file(tmp_path))
    reference = UrdfChain.from_file(bundled_urdf("two_link_arm.urdf"), JOINTS)
    model = pin.buildModelFromUrdf(str(REPO_URDF / "two_link_arm.urdf"))  # joints in the file's order
    data = model.createData()
    # the arm's values, from the comment of two_link_arm.urdf: masses, link lengths, centres of mass, inertias
    m1, m2, l1, lc1, lc2, i1, i2 = 1.2, 0.75, 0.5, 0.25, 0.2, 0.02525, 0.01015625
    for q in np.random.default_rng(7).uniform(-math.pi, math.pi, (5, 2)):
        c2 = math.cos(q[1])
        textbook = np.array([[m1 * lc1 ** 2 + m2 * (l1 ** 2 + lc2 ** 2 + 2 * l1 * lc2 * c2) + i1 + i2,
                              m2 * (lc2 ** 2 + l1 * lc2 * c2) + i2],
                             [m2 * (lc2 ** 2 + l1 * lc2 * c2) + i2, m2 * lc2 ** 2 + i2]])
        for links in (ctrl.links, sim.links):
            np.testing.assert_allclose(links.mass_matrix(q), reference.mass_matrix(q), rtol=0, atol=1e-12)
            np.testing.assert_allclose(links.mass_matrix(q), pin.crba(model, data, q), rtol=0, atol=1e-12)
            np.testing.assert_allclose(links.mass_matrix(q), textbook, rtol=0, atol=1e-12)
    assert ctrl.urdf_source == sim.urdf_source == str(bundled_urdf("two_link_arm.urdf"))


def test_a_rising_floor_reads_back_from_its_settings(pin):
    """foot_landing's floor (0.35 m/s from 0.05 s) written as contact.* settings (config.contact_parameters)
    gives the simulated robot the same PlaneContact; a negative rise time is refused with its key."""
    ctrl, sim = config.load(config.bundled("compliant_leg.yaml"))
    floor = scenarios.make("foot_landing", sim.joints, links=sim.links, floor=sim.contact).contacts[0]
    assert floor.speed == 0.35 and floor.start_time == 0.05 and floor.rise_time > 0.0
    params = {**config.layered_parameters([config.bundled("compliant_leg.yaml")], SIM_NODE),
              **config.contact_parameters(floor)}
    assert config.sim_setup(params).contact == floor
    problems = config.sim_check({**params, "contact.rise_time": -1.0}).problems
    assert [p.key for p in problems] == ["contact.rise_time"]
