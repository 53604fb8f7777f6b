"""package.xml and the pinned requirements match what the code imports: nothing missing, nothing unused.

Reference: REP 149 (package format 3) for the dependency tags, and the rosdep keys of the rosdistro
database (rosdep/python.yaml, <distro>/distribution.yaml), looked up there by hand for each entry
of KEYS. Every import of a file that ships or tests the package must map to a declared key; every
declared key must be imported or appear in USED_WITHOUT_IMPORT with the place that uses it.
"""
import ast
import re
import sys
import xml.etree.ElementTree as ET
from pathlib import Path

ROOT = Path(__file__).resolve().parent.parent
LOCAL = {"compliant_damping"} | {p.stem for p in (ROOT / "test").glob("*.py")}  # the package and test helpers
# import name -> (rosdep key, PyPI distribution pinned in requirements-common.txt or None for ROS wheels)
KEYS = {
    "rclpy": ("rclpy", None), "rcl_interfaces": ("rcl_interfaces", None),
    "builtin_interfaces": ("builtin_interfaces", None), "ament_index_python": ("ament_index_python", None),
    "sensor_msgs": ("sensor_msgs", None), "std_msgs": ("std_msgs", None), "std_srvs": ("std_srvs", None),
    "diagnostic_msgs": ("diagnostic_msgs", None), "lifecycle_msgs": ("lifecycle_msgs", None),
    "rosgraph_msgs": ("rosgraph_msgs", None), "trajectory_msgs": ("trajectory_msgs", None),
    "launch": ("launch", None), "launch_ros": ("launch_ros", None), "launch_testing": ("launch_testing", None),
    "numpy": ("python3-numpy", "numpy"), "scipy": ("python3-scipy", "scipy"), "yaml": ("python3-yaml", "PyYAML"),
    "matplotlib": ("python3-matplotlib", "matplotlib"), "tqdm": ("python3-tqdm", "tqdm"),
    "numba": ("python3-numba", "numba"), "rosbags": ("python3-rosbags-pip", "rosbags"),
    "pinocchio": ("pinocchio", "pin"),
    "pytest": ("python3-pytest", "pytest"), "hypothesis": ("python3-hypothesis", "hypothesis"),
    "control": ("python-control-pip", "control"), "setuptools": ("python3-setuptools", "setuptools"),
}
# declared keys / pinned distributions used without an import, and where
USED_WITHOUT_IMPORT = {
    "ros2launch": "the `ros2 launch` command of the launch files' usage lines",
    "python3-pytest-timeout": "pytest.ini `timeout`", "pytest-timeout": "pytest.ini `timeout`",
    "python3-colcon-common-extensions": "test_colcon_install.py runs colcon",
    "colcon-core": "test_colcon_install.py runs colcon", "colcon-ros": "colcon's ament_python build type",
    "llvmlite": "numba's compiler back end, pinned to the release matching numba",
}


def imports() -> dict:
    """Top-level third-party module -> files importing it (absolute imports only)."""
    found = {}
    files = [*ROOT.glob("compliant_damping/**/*.py"), *ROOT.glob("launch/*.py"), *ROOT.glob("test/*.py"),
             ROOT / "setup.py"]
    for path in files:
        for node in ast.walk(ast.parse(path.read_text(), str(path))):
            names = ([a.name for a in node.names] if isinstance(node, ast.Import) else
                     [node.module] if isinstance(node, ast.ImportFrom) and node.level == 0 else [])
            for name in names:
                top = name.split(".")[0]
                if top not in sys.stdlib_module_names and top not in LOCAL:
                    found.setdefault(top, []).append(path.name)
    return found


def declared() -> set:
    tags = ("buildtool_depend", "exec_depend", "test_depend", "depend")
    root = ET.parse(ROOT / "package.xml").getroot()
    return {e.text.strip() for tag in tags for e in root.iter(tag)}


def pinned(name: str) -> dict:
    pins = {}
    for line in (ROOT / name).read_text().splitlines():
        m = re.match(r"^([A-Za-z0-9_.-]+)==(\S+)", line)
        if m:
            pins[m.group(1)] = m.group(2)
    return pins


def test_every_import_has_a_declared_key():
    used = imports()
    unknown = {m: f for m, f in used.items() if m not in KEYS}
    assert not unknown, f"imports without a rosdep key in this test's table: {unknown}"
    missing = {KEYS[m][0]: f for m, f in used.items() if KEYS[m][0] not in declared()}
    assert not missing, f"imported but not in package.xml: {missing}"


def test_nothing_declared_is_unused():
    imported = {KEYS[m][0] for m in imports()}
    unused = declared() - imported - set(USED_WITHOUT_IMPORT)
    assert not unused, f"declared in package.xml but neither imported nor listed as used: {unused}"


def test_pinned_distributions_are_used():
    imported = {KEYS[m][1] for m in imports()}
    unused = set(pinned("requirements-common.txt")) - imported - set(USED_WITHOUT_IMPORT)
    assert not unused, f"pinned in requirements-common.txt but unused: {unused}"


def test_the_two_ros_environments_pin_the_same_packages():
    """Kilted (ros-NAME) and Jazzy (ros-jazzy-NAME) wheels: the same ROS packages, each pinned."""
    kilted = {n.removeprefix("ros-") for n in pinned("requirements.txt")}
    jazzy = {n.removeprefix("ros-jazzy-") for n in pinned("requirements-jazzy.txt")}
    assert kilted == jazzy
    ros_imports = {m.replace("_", "-") for m, (_, dist) in KEYS.items() if dist is None and m in imports()}
    launch_packages = {"launch", "launch-ros", "launch-testing"}  # not on PyPI: tests skip without them
    assert ros_imports - launch_packages <= kilted, ros_imports - launch_packages - kilted


def test_ros2launch_usage_is_documented_in_the_launch_files():
    assert all("ros2 launch compliant_damping" in p.read_text() for p in ROOT.glob("launch/*.launch.py"))
