"""Layered parameter files: config/laws/*.yaml over one_joint.yaml, controller-only files.

The reference for layering is ROS 2 itself: with several ``--params-file`` arguments rcl keeps
one value per parameter and a later file overrides an earlier one key by key (checked by hand
with rclpy: a node started on one_joint.yaml then laws/motor_pd.yaml reads law motor_pd and the
base file's link_damping). config.layered_parameters must give the same result.
"""
from pathlib import Path

import pytest

from compliant_damping.io import config
from compliant_damping.io.config import CONTROLLER_NODE, SIM_NODE, ConfigError

LAW_LAYERS = sorted((config.share_dir() / "config" / "laws").glob("*.yaml"))


def test_law_layers_exist():
    assert {p.stem for p in LAW_LAYERS} >= {"motor_pd", "link_damping", "decoupled_damper",
                                             "decoupled_impedance", "decoupled_damper_shaped"}


@pytest.mark.parametrize("layer", LAW_LAYERS, ids=lambda p: p.name)
def test_law_layer_loads_over_the_bundled_joint(layer):
    """Each layer sets its law and gains; everything it does not name comes from the base file."""
    base_ctrl, base_sim = config.load(config.bundled())
    ctrl, sim = config.load(config.bundled(), layer)
    layer_params = config.node_parameters(config.read(layer), CONTROLLER_NODE)
    assert ctrl.law == layer_params["law"]
    knee = ctrl.joints[0]
    for key, value in layer_params.items():
        if key.startswith("knee.gains."):
            assert getattr(knee.gains, key.rsplit(".", 1)[1]) == value, key
    assert knee.model == base_ctrl.joints[0].model and knee.limits == base_ctrl.joints[0].limits
    assert sim == base_sim  # a law layer leaves the simulated joint alone
    with pytest.raises(ConfigError) as info:
        config.node_parameters(config.read(layer), SIM_NODE)
    assert info.value.key == SIM_NODE


def test_later_file_overrides_key_by_key(tmp_path):
    first, second = tmp_path / "first.yaml", tmp_path / "second.yaml"
    first.write_text(f"{CONTROLLER_NODE}:\n  ros__parameters:\n    law: zero\n    a: {{b: 1.0, c: 2.0}}\n")
    second.write_text(f"/**:\n  ros__parameters:\n    a: {{c: 3.0}}\n{SIM_NODE}:\n  ros__parameters:\n    x: 1\n")
    assert config.layered_parameters([first, second], CONTROLLER_NODE) == {"law": "zero", "a.b": 1.0, "a.c": 3.0}
    assert config.layered_parameters(first, CONTROLLER_NODE)["a.c"] == 2.0  # one path alone works too
    with pytest.raises(ConfigError) as info:
        config.layered_parameters([first], SIM_NODE)
    assert info.value.key == SIM_NODE and "first.yaml" in info.value.reason


def test_controller_only_file():
    path = config.share_dir() / "config" / "hardware_template.yaml"
    setup = config.load_controller(path)
    lim = setup.joints[0].limits
    assert setup.lock_gains and lim.torque <= lim.driver_torque
    with pytest.raises(ConfigError) as info:
        config.load(path)
    assert info.value.key == SIM_NODE


def test_every_hardware_template_key_is_commented():
    """Each key line of the template carries a comment (unit, meaning, how to choose it)."""
    lines = Path(config.share_dir() / "config" / "hardware_template.yaml").read_text().splitlines()
    keys = [ln for ln in lines if ln.strip() and not ln.lstrip().startswith("#") and ":" in ln
            and ln.strip() not in (f"/**/{CONTROLLER_NODE}:", "ros__parameters:")]
    assert keys and all("#" in ln for ln in keys), [ln for ln in keys if "#" not in ln]
