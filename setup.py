"""ament_python package: installs with colcon in a ROS 2 workspace or with pip in a venv."""
from glob import glob

from setuptools import find_packages, setup

PACKAGE = "compliant_damping"

setup(
    name=PACKAGE,
    version="0.1.0",
    packages=find_packages(exclude=["test", "test.*"]),
    data_files=[
        ("share/ament_index/resource_index/packages", [f"resource/{PACKAGE}"]),
        (f"share/{PACKAGE}", ["package.xml"]),
        (f"share/{PACKAGE}/config", glob("config/*.yaml")),
        (f"share/{PACKAGE}/config/laws", glob("config/laws/*.yaml")),
        (f"share/{PACKAGE}/config/leg_laws", glob("config/leg_laws/*.yaml")),
        (f"share/{PACKAGE}/launch", glob("launch/*.py")),
        (f"share/{PACKAGE}/urdf", glob("urdf/*.urdf")),
    ],
    install_requires=["setuptools"],
    zip_safe=True,
    maintainer="compliant_damping maintainers",
    maintainer_email="maintainers@compliant-damping.invalid",
    description="Decoupled link-side damping and impedance for series-elastic joints.",
    license="Apache-2.0",
    extras_require={"test": ["pytest"]},  # colcon test runs pytest when this names it (tests_require left setuptools 72)
    entry_points={
        "console_scripts": [
            "cdamp = compliant_damping.cli:main",
            "damping_controller = compliant_damping.nodes.controller_node:main",
            "simulated_joint = compliant_damping.nodes.simulated_joint_node:main",
            "scenario_player = compliant_damping.nodes.scenario_player:main",
        ],
    },
)
