"""The robots node_latency.py drives: each one's controller parameter file and the joint states it is sent.

* ``one_joint``: config/one_joint.yaml, the built-in bench knee;
* ``leg``: config/compliant_leg.yaml, the bundled three-joint URDF leg (as the file sets it, with
  the ordered array output on);
* ``chain7``: the generated seven-joint spatial chain of tick_worker.py's ``robot7`` case
  (link_dynamics_cost.seven_joint_urdf), with the bench knee's drive, gains and limits on every
  joint and positions within +-2 rad, as tick_worker.robot builds it. Its URDF and parameter file
  are written to a temporary folder at run time: an invented robot for timing only.

Each controller gets one parameter file per round, written under the child's namespace, with the
law and the watchdog timeout of the benchmark in it.
"""
from __future__ import annotations

import dataclasses
from dataclasses import dataclass
from pathlib import Path

import numpy as np
import yaml
from builtin_interfaces.msg import Time
from link_dynamics_cost import seven_joint_urdf
from sensor_msgs.msg import JointState

from compliant_damping.io import config

LAW = "decoupled_damper"
REST_Q = 0.05  # rad, link position of every joint in the states sent
ROBOTS = ("one_joint", "leg", "chain7")
CHAIN_JOINTS = tuple(f"j{i}" for i in range(7))


@dataclass(frozen=True)
class BenchRobot:
    name: str
    description: str
    params: dict          # the controller's flat parameters (dotted keys)
    control_rate: float   # Hz
    state_names: list     # JointState entries: link, motor per joint
    q0: np.ndarray        # rad, link positions sent (before noise)
    theta0: np.ndarray    # rad, motor positions: the springs hold the gravity load at q0
    stiffness: np.ndarray  # N m/rad, nominal springs (the spring torque in the effort field)

    @property
    def n(self) -> int:
        return len(self.q0)

    def state(self, rng, stamp_ns: int) -> JointState:
        """A joint state near q0, theta0 with small noise (1e-5 rad, 1e-3 rad/s), stamped ``stamp_ns``."""
        n = self.n
        q = self.q0 + 1e-5 * rng.standard_normal(n)
        theta = self.theta0 + 1e-5 * rng.standard_normal(n)
        dq, dtheta = 1e-3 * rng.standard_normal((2, n))
        msg = JointState(name=self.state_names, position=np.column_stack([q, theta]).ravel().tolist(),
                         velocity=np.column_stack([dq, dtheta]).ravel().tolist(),
                         effort=np.column_stack([self.stiffness * (theta - q), np.zeros(n)]).ravel().tolist())
        msg.header.stamp = Time(sec=stamp_ns // 1_000_000_000, nanosec=stamp_ns % 1_000_000_000)
        return msg

    def controller_file(self, ns: str, path: Path, overrides: dict) -> Path:
        """The parameter file of this robot's controller in namespace ``ns``, ``overrides`` applied."""
        tree: dict = {}
        for key, value in {**self.params, **overrides}.items():
            *parents, leaf = key.split(".")
            branch = tree
            for part in parents:
                branch = branch.setdefault(part, {})
            branch[leaf] = value
        path.write_text(yaml.safe_dump({f"{ns}/{config.CONTROLLER_NODE}": {"ros__parameters": tree}},
                                       sort_keys=False))
        return path


def chain7_file(folder: Path) -> Path:
    """Write the seven-joint chain's URDF and controller parameter file to ``folder``; the file's path."""
    urdf = folder / "chain7.urdf"
    urdf.write_text(seven_joint_urdf(len(CHAIN_JOINTS)))
    knee = config.load_controller(config.bundled()).joints[0]
    limits = dataclasses.replace(knee.limits, position_lower=-2.0, position_upper=2.0)
    joint = {"model": {"motor_inertia": knee.model.motor_inertia, "spring_stiffness": knee.model.spring_stiffness},
             "gains": dataclasses.asdict(knee.gains), "limits": dataclasses.asdict(limits)}
    params = {"joint_names": list(CHAIN_JOINTS), "nominal_urdf": str(urdf), "law": LAW, "control_rate": 1000.0,
              "watchdog_timeout": 0.05, **{name: joint for name in CHAIN_JOINTS}}
    path = folder / "chain7.yaml"
    path.write_text(yaml.safe_dump({f"/**/{config.CONTROLLER_NODE}": {"ros__parameters": params}}, sort_keys=False))
    return path


def robot(name: str, description: str, path: Path) -> BenchRobot:
    """The robot of parameter file ``path``: its controller's parameters and the states near REST_Q."""
    params = config.node_parameters(config.read(path), config.CONTROLLER_NODE)
    setup = config.controller_setup(params)
    n = len(setup.joints)
    q0 = np.full(n, REST_Q)
    stiffness = np.array([j.model.spring_stiffness for j in setup.joints])
    theta0 = q0 + np.asarray(setup.links.gravity(q0)) / stiffness
    names = [entry for j in setup.joints for entry in (j.link_state, j.motor_state)]
    return BenchRobot(name, description, params, setup.control_rate, names, q0, theta0, stiffness)


def make_robots(names, folder: Path) -> list[BenchRobot]:
    """The robots ``names`` (of ROBOTS), files written to ``folder`` where needed."""
    made = []
    for name in names:
        if name == "one_joint":
            made.append(robot(name, "config/one_joint.yaml, the built-in bench knee", config.bundled()))
        elif name == "leg":
            made.append(robot(name, "config/compliant_leg.yaml, 3-joint URDF leg, array output on",
                              config.bundled("compliant_leg.yaml")))
        elif name == "chain7":
            made.append(robot(name, "generated 7-joint URDF chain (tick_worker's robot7), bench knee's drive, "
                                    "gains and limits per joint", chain7_file(folder)))
    return made
