"""Pure parts of `cdamp demo`: the loopback guard and the parameter file it hands to namespaced nodes."""
import pytest

from compliant_damping.io import config
from compliant_damping import demo


@pytest.mark.parametrize("env", [
    {"ROS_LOCALHOST_ONLY": "1", "ROS_DOMAIN_ID": "57"},
    {"ROS_AUTOMATIC_DISCOVERY_RANGE": "SUBNET", "ROS_LOCALHOST_ONLY": "1", "ROS_DOMAIN_ID": "57"},
    {"ROS_AUTOMATIC_DISCOVERY_RANGE": "LOCALHOST", "ROS_LOCALHOST_ONLY": "1"},
])
def test_demo_refuses_without_loopback_discovery(env):
    with pytest.raises(demo.DemoError, match="refusing"):
        demo.check_env(env)


def test_demo_accepts_loopback_discovery():
    demo.check_env({"ROS_AUTOMATIC_DISCOVERY_RANGE": "LOCALHOST", "ROS_LOCALHOST_ONLY": "1", "ROS_DOMAIN_ID": "7"})


def test_namespaced_parameter_file_keeps_every_value(tmp_path):
    path = demo.namespaced_file(config.bundled(), "/ns", tmp_path / "p.yaml")
    doc = config.read(path)
    assert set(doc) == {f"/ns/{config.CONTROLLER_NODE}", f"/ns/{config.SIM_NODE}"}
    original = config.read(config.bundled())
    for node in (config.CONTROLLER_NODE, config.SIM_NODE):
        assert config.node_parameters(doc, node) == config.node_parameters(original, node)
