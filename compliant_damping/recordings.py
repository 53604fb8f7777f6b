"""Recorded runs as plain arrays: CSV files of ``cdamp simulate --csv`` and rosbag2 recordings.

A rosbag2 recording (MCAP or SQLite storage, a bag folder or a single storage file) holds
sensor_msgs/JointState on ``joint_states`` (per joint a link entry NAME with position,
velocity and effort = spring torque, and a motor entry NAME_motor) and sensor_msgs/JointState
effort commands on ``motor_effort`` (entry NAME_motor). Bags are read with ``rosbags``
(its own ROS 2 message definitions; no ROS installation needed). No ROS here.
"""
from __future__ import annotations

import csv
from dataclasses import dataclass
from pathlib import Path

import numpy as np

from .simulate import run_metrics

CSV_SERIES = ("q", "dq", "theta", "dtheta", "tau_m", "tau_s")
STATES_TOPIC = "joint_states"
COMMAND_TOPIC = "motor_effort"
MOTOR_SUFFIX = "_motor"


@dataclass
class JointRecord:
    """One joint's series. States at ``t`` (s): q, dq, theta, dtheta (rad, rad/s), tau_s (N m);
    motor torque commands tau_m (N m) at ``t_cmd`` (s)."""

    t: np.ndarray
    q: np.ndarray
    dq: np.ndarray
    theta: np.ndarray
    dtheta: np.ndarray
    tau_s: np.ndarray
    t_cmd: np.ndarray
    tau_m: np.ndarray


@dataclass
class Recording:
    """A run: its source (file name) and a JointRecord per joint name, in recorded order."""

    source: str
    joints: dict


class RecordingError(ValueError):
    """A file is not a readable run (names the file and what is missing)."""


def metrics(rec: Recording) -> dict:
    """simulate.run_metrics per joint: peak |tau_m|, peak torque rate, link range, max deflection."""
    return {name: run_metrics(j.q, j.theta, j.tau_m, np.diff(j.t_cmd)) for name, j in rec.joints.items()}


def from_result(result, source: str = "simulation") -> Recording:
    """A simulate.SimResult as a Recording (commands at the control ticks)."""
    joints = {}
    for name in result.joint_names:
        s = {k: result.series(k, name) for k in CSV_SERIES}
        joints[name] = JointRecord(t=result.t, t_cmd=result.t, **s)
    return Recording(source, joints)


def read(path) -> Recording:
    """A run from a ``.csv`` file or a rosbag2 recording (folder, ``.mcap`` or ``.db3``)."""
    path = Path(path)
    if not path.exists():
        raise RecordingError(f"{path}: no such file or folder")
    return read_csv(path) if path.suffix == ".csv" else read_bag(path)


def read_csv(path) -> Recording:
    """A run from the CSV layout of ``cdamp simulate --csv``: t, then SERIES.NAME columns."""
    with open(path, newline="") as fh:
        rows = list(csv.reader(fh))
    if not rows or rows[0][:1] != ["t"]:
        raise RecordingError(f"{path}: expected a header starting with 't'")
    header, data = rows[0], np.array(rows[1:], dtype=float).reshape(-1, len(rows[0]))
    if len(data) == 0:
        raise RecordingError(f"{path}: no rows")
    col = {name: i for i, name in enumerate(header)}
    names = list(dict.fromkeys(h.split(".", 1)[1] for h in header[1:] if "." in h))
    joints = {}
    for n in names:
        missing = [f"{k}.{n}" for k in CSV_SERIES if f"{k}.{n}" not in col]
        if missing:
            raise RecordingError(f"{path}: no column {missing[0]}")
        s = {k: data[:, col[f"{k}.{n}"]] for k in CSV_SERIES}
        joints[n] = JointRecord(t=data[:, 0], t_cmd=data[:, 0], **s)
    if not joints:
        raise RecordingError(f"{path}: no joint columns")
    return Recording(Path(path).name, joints)


def _stamp(msg, log_time: int) -> int:
    """Header stamp (ns), or the bag's log time where the stamp is zero."""
    return msg.header.stamp.sec * 1_000_000_000 + msg.header.stamp.nanosec or log_time


def _topic(connections, name, path):
    """Connections of JointState topic ``name`` (its last path element), e.g. /robot/joint_states."""
    found = [c for c in connections if c.topic.rstrip("/").split("/")[-1] == name]
    if not found:
        raise RecordingError(f"{path}: no {name} topic (topics: {sorted({c.topic for c in connections})})")
    wrong = [c for c in found if c.msgtype != "sensor_msgs/msg/JointState"]
    if wrong:
        raise RecordingError(f"{path}: {wrong[0].topic} is {wrong[0].msgtype}, expected sensor_msgs/msg/JointState")
    return found


def read_bag(path) -> Recording:
    """A run from a rosbag2 recording (see the module notes for the topics and entries)."""
    from rosbags.rosbag2 import Reader
    from rosbags.typesys import Stores, get_typestore

    store = get_typestore(Stores.ROS2_KILTED)
    states: dict = {}   # link name -> list of (t ns, q, dq, theta, dtheta, tau_s)
    commands: dict = {}  # entry name -> list of (t ns, effort)
    with Reader(path) as bag:
        state_conns = _topic(bag.connections, STATES_TOPIC, path)
        command_conns = _topic(bag.connections, COMMAND_TOPIC, path)
        for conn, log_time, raw in bag.messages(connections=state_conns + command_conns):
            msg = store.deserialize_cdr(raw, conn.msgtype)
            t = _stamp(msg, log_time)
            names = list(msg.name)
            if conn in command_conns:
                for n, e in zip(names, msg.effort):
                    commands.setdefault(n, []).append((t, float(e)))
                continue
            index = {n: i for i, n in enumerate(names)}
            for n, i in index.items():
                m = index.get(n + MOTOR_SUFFIX)
                if m is None or max(i, m) >= min(len(msg.position), len(msg.velocity)):
                    continue
                tau_s = float(msg.effort[i]) if i < len(msg.effort) else np.nan
                states.setdefault(n, []).append((t, msg.position[i], msg.velocity[i],
                                                 msg.position[m], msg.velocity[m], tau_s))
    if not states:
        raise RecordingError(f"{path}: no joint with a link entry NAME and a motor entry NAME{MOTOR_SUFFIX}")
    joints = {}
    t0 = min(s[0][0] for s in states.values())
    for n, rows in states.items():
        cmd = commands.get(n + MOTOR_SUFFIX)
        if not cmd:
            raise RecordingError(f"{path}: no {COMMAND_TOPIC} entry {n + MOTOR_SUFFIX!r}")
        rows, cmd = sorted(rows, key=lambda r: r[0]), sorted(cmd, key=lambda r: r[0])
        s, c = np.array([r[1:] for r in rows]), np.array([r[1] for r in cmd])
        # seconds from the first state: integer ns first, so float seconds keep their resolution
        joints[n] = JointRecord(t=np.array([(r[0] - t0) * 1e-9 for r in rows]), q=s[:, 0], dq=s[:, 1],
                                theta=s[:, 2], dtheta=s[:, 3], tau_s=s[:, 4],
                                t_cmd=np.array([(r[0] - t0) * 1e-9 for r in cmd]), tau_m=c)
    return Recording(Path(path).name, joints)
