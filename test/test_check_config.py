"""``cdamp check-config``: every problem of a file at once, and the limit consistency rules.

Outside references: the two reach formulas follow from the work-energy theorem and are checked
against scipy's ``solve_ivp`` of the same spring-mass motion; YAML positions against PyYAML's
own problem mark; the did-you-mean against ``difflib.get_close_matches``.
"""
import copy
import json
import math

import pytest
import yaml
from scipy.integrate import solve_ivp

from compliant_damping import cli
from compliant_damping.io import config, config_check
from compliant_damping.io.config import CONTROLLER_NODE, SIM_NODE

BASE = config.read(config.bundled())
BUNDLED = sorted((config.share_dir() / "config").glob("*.yaml"))
LAYERS = sorted((config.share_dir() / "config" / "laws").glob("*.yaml"))


def _write(tmp_path, doc, name="params.yaml"):
    path = tmp_path / name
    path.write_text(yaml.safe_dump(doc))
    return str(path)


def _changed(change):
    doc = copy.deepcopy(BASE)
    change(doc)
    return doc


def _ctrl(doc):
    return doc[f"/**/{CONTROLLER_NODE}"]["ros__parameters"]


def _sim(doc):
    return doc[f"/**/{SIM_NODE}"]["ros__parameters"]


def _run(capsys, *argv):
    code = cli.main(["check-config", *argv])
    return code, capsys.readouterr().out.splitlines()


@pytest.mark.parametrize("path", BUNDLED, ids=lambda p: p.name)
def test_bundled_file_is_ok(path, capsys):
    code, out = _run(capsys, str(path))
    assert (code, out) == (0, [f"{path}: OK"])


@pytest.mark.parametrize("layer", LAYERS, ids=lambda p: p.name)
def test_law_layer_over_bundled_joint_is_ok(layer, capsys):
    code, out = _run(capsys, str(config.bundled()), "--layer", str(layer))
    assert code == 0 and out[-1].endswith(": OK")


def test_every_problem_of_both_sections_is_printed(tmp_path, capsys):
    def spoil(doc):
        _ctrl(doc)["knee"]["limits"]["position_uper"] = 0.5      # unknown, misspelt
        _ctrl(doc)["knee"]["gains"]["motor_damping"] = 10        # int where a float is needed
        _ctrl(doc)["control_rate"] = -1.0                        # impossible
        _sim(doc)["knee"]["stop_uper"] = 0.5                     # unknown, misspelt
        _sim(doc)["knee"]["link_inertia"] = 0.0                  # impossible
        _sim(doc)["knee"]["motor_inertia"] = "heavy"             # wrong type
    code, out = _run(capsys, _write(tmp_path, _changed(spoil)))
    keys = [line.split(": ", 1)[0] for line in out]
    assert code == 1
    assert sorted(keys) == sorted([
        "damping_controller.knee.limits.position_uper", "damping_controller.knee.gains.motor_damping",
        "damping_controller.control_rate", "simulated_joint.knee.stop_uper",
        "simulated_joint.knee.link_inertia", "simulated_joint.knee.motor_inertia"])
    lines = dict(line.split(": ", 1) for line in out)
    assert "did you mean knee.limits.position_upper?" in lines["damping_controller.knee.limits.position_uper"]
    assert "did you mean knee.stop_upper?" in lines["simulated_joint.knee.stop_uper"]
    assert "10.0" in lines["damping_controller.knee.gains.motor_damping"]  # what to write instead


def test_json_output(tmp_path, capsys):
    path = _write(tmp_path, _changed(lambda d: _ctrl(d).update(watchdog_timeout=0.001)))
    code, out = _run(capsys, path, "--json")
    report = json.loads("\n".join(out))
    assert code == 1 and report["ok"] is False and report["files"] == [path]
    assert report["problems"] == [{"section": CONTROLLER_NODE, "key": "watchdog_timeout",
                                   "reason": report["problems"][0]["reason"]}]
    assert "two control periods" in report["problems"][0]["reason"]


def test_a_layer_with_a_typo_is_caught(tmp_path, capsys):
    layer = tmp_path / "layer.yaml"
    layer.write_text(f"{CONTROLLER_NODE}:\n  ros__parameters:\n    knee:\n      gains:\n        link_dampng: 3.0\n")
    code, out = _run(capsys, str(config.bundled()), "--layer", str(layer))
    assert code == 1 and len(out) == 1
    assert out[0].startswith("damping_controller.knee.gains.link_dampng: unknown key")


def test_yaml_syntax_error_gives_file_line_column(tmp_path, capsys):
    path = tmp_path / "broken.yaml"
    path.write_text(f"{SIM_NODE}:\n  ros__parameters:\n    seed: 0\n   state_rate: 1000.0\n")
    with pytest.raises(yaml.MarkedYAMLError) as raw:  # the reference: PyYAML's mark, 0-based
        yaml.safe_load(path.read_text())
    mark = raw.value.problem_mark
    code, out = _run(capsys, str(path))
    start = raw.value.context_mark
    assert code == 1 and out == [f"{path}:{mark.line + 1}:{mark.column + 1}: {raw.value.problem} "
                                 f"({raw.value.context} started at {start.line + 1}:{start.column + 1})"]
    assert (mark.line + 1, mark.column + 1) == (4, 4)  # the misindented key, as an editor counts


def test_file_without_a_node_section(tmp_path, capsys):
    code, out = _run(capsys, _write(tmp_path, {"other_node": {"ros__parameters": {"a": 1.0}}}))
    assert code == 1 and out == [f"{tmp_path / 'params.yaml'}: no section for {CONTROLLER_NODE} or {SIM_NODE}"]


# --- deflection the controller can reach --------------------------------------------------------

def _peak(inertia, stiffness, push, speed):
    """Largest x of inertia x'' = push - stiffness x from x = 0, x' = speed (scipy solve_ivp)."""
    turn = lambda t, y: y[1]  # noqa: E731
    turn.terminal, turn.direction = True, -1
    sol = solve_ivp(lambda t, y: [y[1], (push - stiffness * y[0]) / inertia], (0.0, 10.0), [0.0, speed],
                    events=turn, rtol=1e-11, atol=1e-13)
    return sol.y_events[0][0][0]


def test_deflection_reach_matches_the_blocked_link_motion():
    """Bundled knee: T 40 N m, k 300 N m/rad, B 0.15 kg m^2, motor speed trip 10 rad/s."""
    reach = config_check.deflection_reach(40.0, 300.0, 0.15, 10.0)
    assert reach == pytest.approx(_peak(0.15, 300.0, 40.0, 10.0), rel=1e-8)
    assert reach == pytest.approx(40 / 300 + math.sqrt((40 / 300) ** 2 + 0.15 * 10.0 ** 2 / 300), rel=1e-12)
    assert reach == pytest.approx(0.39367, abs=1e-5)  # by hand: 0.13333 + sqrt(0.017778 + 0.05)
    assert config_check.deflection_reach(40.0, 300.0, 0.15, 0.0) == pytest.approx(2 * 40.0 / 300.0)  # step load: twice static
    assert config_check.deflection_reach(40.0, 300.0, 0.15, math.inf) == math.inf


def test_deflection_limit_beyond_reach_is_reported(tmp_path, capsys):
    def limit(value):
        return _changed(lambda d: _ctrl(d)["knee"]["limits"].update(deflection=value))
    code, out = _run(capsys, _write(tmp_path, limit(0.40)))
    assert code == 1 and len(out) == 1
    assert out[0].startswith("damping_controller.knee.limits.deflection: 0.4 rad can never trip") and "0.3937" in out[0]
    assert _run(capsys, _write(tmp_path, limit(0.39)))[0] == 0


# --- position limits against the simulated end stops --------------------------------------------

def test_stop_penetration_matches_the_contact_motion():
    """Link of 0.25 kg m^2 at 8 rad/s into a 20000 N m/rad stop, pressed by 62 N m."""
    energy = 0.5 * 0.25 * 8.0 ** 2
    p = config_check.stop_penetration(62.0, 20000.0, energy)
    assert p == pytest.approx(_peak(0.25, 20000.0, 62.0, 8.0), rel=1e-8)


def test_bundled_knee_stop_reach():
    """62 N m (driver 60 + gravity 2), link 8 rad/s, motor 10 rad/s: by hand
    0.0031 + sqrt(0.0031^2 + (0.25 * 64 + 0.15 * 100) / 20000) = 0.042592 rad past the stop."""
    energy = 0.5 * (0.25 * 8.0 ** 2 + 0.15 * 10.0 ** 2)
    assert config_check.stop_penetration(62.0, 20000.0, energy) == pytest.approx(0.042592, abs=1e-6)


@pytest.mark.parametrize("side,value,reachable", [("upper", 0.84, True), ("upper", 0.85, False),
                                               ("lower", -0.84, True), ("lower", -0.85, False)])
def test_position_limit_beyond_the_stop_reach(tmp_path, capsys, side, value, reachable):
    path = _write(tmp_path, _changed(lambda d: _ctrl(d)["knee"]["limits"].update({f"position_{side}": value})))
    code, out = _run(capsys, path)
    if reachable:
        assert code == 0
    else:
        assert code == 1 and len(out) == 1
        assert out[0].startswith(f"damping_controller.knee.limits.position_{side}: {value} rad can never trip")
        assert f"simulated_joint.knee.stop_{side}" in out[0]


def test_position_rule_needs_both_sections(tmp_path, capsys):
    """A controller-only file cannot be checked against stops it does not have."""
    doc = _changed(lambda d: _ctrl(d)["knee"]["limits"].update(position_upper=5.0))
    del doc[f"/**/{SIM_NODE}"]
    assert _run(capsys, _write(tmp_path, doc))[0] == 0


def test_end_stop_impact_stays_inside_the_bundled_limits(capsys):
    """The bundled limits (stop + 0.02 rad) leave the impact scenario fault-free, yet are reachable:
    the link goes past the stop, less deep than the bound."""
    assert cli.main(["simulate", "--scenario", "end_stop_impact", "--json"]) == 0
    knee = json.loads(capsys.readouterr().out)["joints"]["knee"]
    assert knee["fault"] is None
    assert 0.8 < knee["max_link_position"] < 0.82 < 0.8 + 0.042592
