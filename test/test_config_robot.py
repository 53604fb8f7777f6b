"""Parameter files that describe a URDF robot: the keys, ``cdamp check-config`` and the robot
section's refusals, each naming the key and the reason.

Outside references: the URDF format (ROS wiki, "urdf/XML"): a link's ``<inertial>`` gives its
mass, centre of mass and inertia, which is why a file with a URDF has no per-joint link keys;
the bundled two-link arm's rigid-body quantities against Pinocchio's own URDF reader.
"""
import copy

import pytest
import yaml

from compliant_damping import cli, config
from compliant_damping.config import CONTROLLER_NODE, SIM_NODE
from compliant_damping.dynamics.urdf_chain import bundled_urdf

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
