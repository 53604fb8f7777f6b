"""Parameter files: every class of bad input is refused with a ConfigError naming the dotted key."""
import copy

import pytest
import yaml

from compliant_damping.io import config, parameter_keys
from compliant_damping.io.config import CONTROLLER_NODE, SIM_NODE, ConfigError

BASE = config.read(config.bundled())


def load_changed(tmp_path, change):
    """config.load on a copy of the bundled file after ``change(document)``."""
    doc = copy.deepcopy(BASE)
    change(doc)
    path = tmp_path / "changed.yaml"
    path.write_text(yaml.safe_dump(doc))
    return config.load(path)


def ctrl(doc):
    return doc[f"/**/{CONTROLLER_NODE}"]["ros__parameters"]


def sim(doc):
    return doc[f"/**/{SIM_NODE}"]["ros__parameters"]


def refused(tmp_path, change) -> ConfigError:
    with pytest.raises(ConfigError) as info:
        load_changed(tmp_path, change)
    return info.value


def test_unchanged_copy_loads(tmp_path):
    """The helper itself does not spoil the file (so the refusals below are due to the change)."""
    controller, simulated = load_changed(tmp_path, lambda doc: None)
    assert controller.joint_names == simulated.joint_names == ["knee"]


def test_unknown_key(tmp_path):
    err = refused(tmp_path, lambda d: sim(d)["knee"].update(spring_stifness=300.0))
    assert err.key == "knee.spring_stifness" and "unknown" in err.reason
    assert "did you mean knee.spring_stiffness?" in err.reason


def test_misspelt_optional_limit_is_refused_with_the_key_meant(tmp_path):
    """The defect behind issue 7: an optional limit misspelt must not leave the limit off."""
    err = refused(tmp_path, lambda d: ctrl(d)["knee"]["limits"].update(position_uper=0.5))
    assert err.key == "knee.limits.position_uper"
    assert "did you mean knee.limits.position_upper?" in err.reason


def test_did_you_mean_stays_within_the_joint():
    """A per-joint key is matched against that joint's keys only (difflib.get_close_matches)."""
    err = parameter_keys.unknown_key("ankle.limits.torqe", CONTROLLER_NODE, ["hip", "ankle"])
    assert err.reason.startswith("unknown key in damping_controller; did you mean ankle.limits.torque?")
    far = parameter_keys.unknown_key("colour", CONTROLLER_NODE, ["hip"])
    assert "did you mean" not in far.reason  # nothing close: no guess


def test_watchdog_below_two_control_periods(tmp_path):
    """Two periods at 1 kHz are 2 ms; 1.5 ms would trip between two regular joint states."""
    err = refused(tmp_path, lambda d: ctrl(d).update(watchdog_timeout=0.0015))
    assert err.key == "watchdog_timeout" and "two control periods" in err.reason
    controller, _ = load_changed(tmp_path, lambda d: ctrl(d).update(watchdog_timeout=0.002))
    assert controller.watchdog_timeout == 0.002  # exactly two periods is possible


def test_ramp_to_zero_longer_than_ten_seconds(tmp_path):
    """40 N m at 3.9 N m/s takes 40 / 3.9 = 10.3 s to ramp to zero: refused; at 4 N m/s 10 s: accepted."""
    err = refused(tmp_path, lambda d: ctrl(d)["knee"]["limits"].update(torque_rate=3.9))
    assert err.key == "knee.limits.torque_rate" and "10.3 s" in err.reason
    controller, _ = load_changed(tmp_path, lambda d: ctrl(d)["knee"]["limits"].update(torque_rate=4.0))
    assert controller.joints[0].limits.torque_rate == 4.0


def test_missing_required_key(tmp_path):
    err = refused(tmp_path, lambda d: sim(d)["knee"].pop("link_inertia"))
    assert err.key == "knee.link_inertia" and "required" in err.reason


def test_int_where_float_needed(tmp_path):
    err = refused(tmp_path, lambda d: sim(d)["knee"].update(spring_stiffness=300))
    assert err.key == "knee.spring_stiffness"
    assert "300.0" in str(err)  # tells the user what to write


def test_negative_inertia(tmp_path):
    err = refused(tmp_path, lambda d: sim(d)["knee"].update(motor_inertia=-0.15))
    assert err.key == "knee.motor_inertia" and "above zero" in err.reason


def test_stops_in_wrong_order(tmp_path):
    err = refused(tmp_path, lambda d: sim(d)["knee"].update(stop_lower=0.8, stop_upper=0.8))
    assert err.key == "knee.stop_lower"


def test_unknown_law(tmp_path):
    err = refused(tmp_path, lambda d: ctrl(d).update(law="sky_damper"))
    assert err.key == "law" and "decoupled_damper" in err.reason  # lists the valid choices


def test_torque_limit_above_driver(tmp_path):
    err = refused(tmp_path, lambda d: ctrl(d)["knee"]["limits"].update(torque=70.0, driver_torque=60.0))
    assert err.key == "knee.limits.torque"


def test_initial_position_outside_stops(tmp_path):
    err = refused(tmp_path, lambda d: sim(d)["knee"].update(initial_position=0.9))
    assert err.key == "knee.initial_position" and "end stops" in err.reason


def test_yaml_syntax_error(tmp_path):
    """Line and column of PyYAML's problem mark (0-based there), counted from 1 as editors do."""
    path = tmp_path / "broken.yaml"
    path.write_text(f"{CONTROLLER_NODE}:\n  ros__parameters:\n    joint_names: [knee\n    law: zero\n")
    with pytest.raises(yaml.MarkedYAMLError) as raw:
        yaml.safe_load(path.read_text())
    with pytest.raises(config.YamlSyntaxError) as info:
        config.load(path)
    err = info.value
    assert (err.line, err.column) == (raw.value.problem_mark.line + 1, raw.value.problem_mark.column + 1)
    assert (err.line, err.column) == (4, 8)  # the ':' after "law", where the open list cannot go on
    assert str(err).startswith(f"{path}:4:8: ") and "flow sequence" in err.reason


def test_missing_node_section(tmp_path):
    err = refused(tmp_path, lambda d: d.pop(f"/**/{SIM_NODE}"))
    assert err.key == SIM_NODE


def _node_setups(path):
    """Setups for every node section a parameter file has (a file may serve one node only)."""
    doc = config.read(path)
    found = []
    for node, build in ((CONTROLLER_NODE, config.controller_setup), (SIM_NODE, config.sim_setup)):
        params = config.node_parameters(doc, node, required=False)
        if params:
            found.append(build(params))
    return found


BUNDLED = sorted((config.share_dir() / "config").glob("*.yaml"))
LAYERS = sorted((config.share_dir() / "config" / "laws").glob("*.yaml"))


def test_bundled_files_exist():
    assert BUNDLED, "no parameter files found in config/"


@pytest.mark.parametrize("path", BUNDLED, ids=lambda p: p.name)
def test_bundled_file_loads(path):
    assert _node_setups(path), f"{path.name} has no section for {CONTROLLER_NODE} or {SIM_NODE}"


@pytest.mark.parametrize("layer", LAYERS, ids=lambda p: p.name)
def test_law_layer_loads_over_bundled_joint(layer):
    """Each law layer in config/laws/ goes over one_joint.yaml; the law it names wins."""
    controller, _ = config.load(config.bundled(), layer)
    named = config.node_parameters(config.read(layer), CONTROLLER_NODE, required=False).get("law")
    assert named is None or controller.law == named
