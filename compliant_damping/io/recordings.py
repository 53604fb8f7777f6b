"""Recorded runs as runs.Run: CSV files of ``cdamp simulate --csv``, the scenario player's ``.npz``
files and rosbag2 recordings.

A rosbag2 recording (MCAP or SQLite storage, a bag folder or a single storage file) holds
sensor_msgs/JointState on ``joint_states`` (per joint a link entry NAME with position,
velocity and effort = spring torque, and a motor entry NAME_motor) and sensor_msgs/JointState
effort commands on ``motor_effort`` (entry NAME_motor). A run's joints share one time base, as
they share messages: every message that names one of the joints must name them all. States and
commands keep their own stamps. Bags are read with ``rosbags`` (its own ROS 2 message
definitions; no ROS installation needed). No ROS here.
"""
from __future__ import annotations

import csv
from pathlib import Path

import numpy as np

from compliant_damping.io.runs import STATE_SERIES, Run

__all__ = ["CSV_SERIES", "RecordingError", "read", "read_bag", "read_csv", "read_npz"]

CSV_SERIES = ("q", "dq", "theta", "dtheta", "tau_m", "tau_s")
STATES_TOPIC = "joint_states"
COMMAND_TOPIC = "motor_effort"
MOTOR_SUFFIX = "_motor"


class RecordingError(ValueError):
    """A file is not a readable run (names the file and what is missing)."""


def _recorded(source: str, names, t, states: dict, t_cmd, tau_m, control_dt=None) -> Run:
    """A Run of a recording: no faults reported, no wall time."""
    return Run(source, tuple(names), t, *(states[k] for k in STATE_SERIES), t_cmd=t_cmd, tau_m=tau_m,
               faults=(None,) * len(names), control_dt=control_dt)


def read(path) -> Run:
    """A run from a ``.csv`` file, a scenario player ``.npz`` file or a rosbag2 recording (folder, ``.mcap``
    or ``.db3``)."""
    path = Path(path)
    if not path.exists():
        raise RecordingError(f"{path}: no such file or folder")
    readers = {".csv": read_csv, ".npz": read_npz}
    return readers.get(path.suffix, read_bag)(path)


def read_csv(path) -> Run:
    """A run from the CSV layout of ``cdamp simulate --csv``: t, then SERIES.NAME columns (commands at ``t``)."""
    with open(path, newline="") as fh:
        rows = list(csv.reader(fh))
    if not rows or rows[0][:1] != ["t"]:
        raise RecordingError(f"{path}: expected a header starting with 't'")
    header, data = rows[0], np.array(rows[1:], dtype=float).reshape(-1, len(rows[0]))
    if len(data) == 0:
        raise RecordingError(f"{path}: no rows")
    col = {name: i for i, name in enumerate(header)}
    names = list(dict.fromkeys(h.split(".", 1)[1] for h in header[1:] if "." in h))
    if not names:
        raise RecordingError(f"{path}: no joint columns")
    missing = [f"{k}.{n}" for n in names for k in CSV_SERIES if f"{k}.{n}" not in col]
    if missing:
        raise RecordingError(f"{path}: no column {missing[0]}")
    series = {k: data[:, [col[f"{k}.{n}"] for n in names]] for k in CSV_SERIES}
    t = data[:, 0]
    return _recorded(Path(path).name, names, t, series, t, series["tau_m"])


NPZ_KEYS = ("joint_names", "t", *STATE_SERIES, "t_cmd", "tau_m")


def read_npz(path) -> Run:
    """A run from a scenario player ``.npz`` file (nodes/scenario_player.py: NPZ_KEYS, optional ``control_dt``)."""
    with np.load(path) as data:
        missing = [k for k in NPZ_KEYS if k not in data.files]
        if missing:
            raise RecordingError(f"{path}: no array {missing[0]!r} (has {sorted(data.files)})")
        arrays = {k: data[k] for k in data.files}
    dt = float(arrays["control_dt"]) if "control_dt" in arrays else None
    return _recorded(Path(path).name, [str(n) for n in arrays["joint_names"]], arrays["t"], arrays,
                     arrays["t_cmd"], arrays["tau_m"], dt)


def _stamp(msg, log_time: int) -> int:
    """Header stamp (ns), or the bag's log time where the stamp is zero."""
    return msg.header.stamp.sec * 1_000_000_000 + msg.header.stamp.nanosec or log_time


def _seconds(stamps, t0: int) -> np.ndarray:
    """Seconds from ``t0`` of integer ns ``stamps``: integers subtracted first, so the seconds keep their resolution."""
    return np.array([(ns - t0) * 1e-9 for ns in stamps])


def _topic(connections, name, path):
    """Connections of JointState topic ``name`` (its last path element), e.g. /robot/joint_states."""
    found = [c for c in connections if c.topic.rstrip("/").split("/")[-1] == name]
    if not found:
        raise RecordingError(f"{path}: no {name} topic (topics: {sorted({c.topic for c in connections})})")
    wrong = [c for c in found if c.msgtype != "sensor_msgs/msg/JointState"]
    if wrong:
        raise RecordingError(f"{path}: {wrong[0].topic} is {wrong[0].msgtype}, expected sensor_msgs/msg/JointState")
    return found


def _joint_entries(msg) -> dict:
    """``{NAME: (q, dq, theta, dtheta, tau_s)}`` of the joints in a joint_states message (link entry NAME and
    motor entry NAME_motor, both with position and velocity; tau_s NaN without the link entry's effort)."""
    index = {n: i for i, n in enumerate(msg.name)}
    out = {}
    for n, i in index.items():
        m = index.get(n + MOTOR_SUFFIX)
        if m is None or max(i, m) >= min(len(msg.position), len(msg.velocity)):
            continue
        tau_s = float(msg.effort[i]) if i < len(msg.effort) else np.nan
        out[n] = (msg.position[i], msg.velocity[i], msg.position[m], msg.velocity[m], tau_s)
    return out


def _stack(samples, keys, topic: str, path):
    """(stamps ns, values with one column per key) of the ``(stamp ns, {key: value})`` messages that name
    ``keys``, in stamp order; raises RecordingError when none does or one names only some of them."""
    rows = []
    for t, values in samples:
        present = [k for k in keys if k in values]
        if present and len(present) < len(keys):
            lost = next(k for k in keys if k not in values)
            raise RecordingError(f"{path}: a {topic} message at {t} ns names {present} but not {lost!r} "
                                 "(the joints of a run share its messages)")
        if present:
            rows.append((t, [values[k] for k in keys]))
    if not rows:
        raise RecordingError(f"{path}: no {topic} entry {keys[0]!r}")
    rows.sort(key=lambda r: r[0])
    return [r[0] for r in rows], np.array([r[1] for r in rows], dtype=float)


def read_bag(path) -> Run:
    """A run from a rosbag2 recording (see the module notes for the topics and entries)."""
    from rosbags.rosbag2 import Reader
    from rosbags.typesys import Stores, get_typestore

    store = get_typestore(Stores.ROS2_KILTED)
    states: list = []    # (stamp ns, {NAME: (q, dq, theta, dtheta, tau_s)}) per joint_states message
    commands: list = []  # (stamp ns, {entry name: effort}) per motor_effort message
    with Reader(path) as bag:
        state_conns = _topic(bag.connections, STATES_TOPIC, path)
        command_conns = _topic(bag.connections, COMMAND_TOPIC, path)
        for conn, log_time, raw in bag.messages(connections=state_conns + command_conns):
            msg = store.deserialize_cdr(raw, conn.msgtype)
            if conn in command_conns:
                commands.append((_stamp(msg, log_time), {n: float(e) for n, e in zip(msg.name, msg.effort)}))
            else:
                states.append((_stamp(msg, log_time), _joint_entries(msg)))
    names = list(dict.fromkeys(n for _, joints in states for n in joints))
    if not names:
        raise RecordingError(f"{path}: no joint with a link entry NAME and a motor entry NAME{MOTOR_SUFFIX}")
    t_ns, s = _stack(states, names, STATES_TOPIC, path)             # s: (ticks, joints, 5)
    t_cmd_ns, tau_m = _stack(commands, [n + MOTOR_SUFFIX for n in names], COMMAND_TOPIC, path)
    states_by_series = {k: np.ascontiguousarray(s[:, :, i]) for i, k in enumerate(STATE_SERIES)}
    return _recorded(Path(path).name, names, _seconds(t_ns, t_ns[0]), states_by_series,
                     _seconds(t_cmd_ns, t_ns[0]), tau_m)
