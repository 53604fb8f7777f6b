"""cdamp report: recorded runs (rosbag2 MCAP bags, simulate --csv files) to metrics, JSON and plots.

The bag is written here with rosbags' rosbag2 Writer (MCAP storage) from analytic signals whose
metrics are known by hand: the peak torque rate of a piecewise-linear ramp is its steepest slope,
the range of A sin(2 pi f t) sampled on its crests is [-A, A].
"""
import json
import math
import subprocess
import sys

import numpy as np
import pytest
from rosbags.rosbag2 import StoragePlugin, Writer
from rosbags.typesys import Stores, get_typestore

from compliant_damping import cli, recordings

STORE = get_typestore(Stores.ROS2_KILTED)
JOINT_STATE = STORE.types["sensor_msgs/msg/JointState"]
HEADER = STORE.types["std_msgs/msg/Header"]
TIME = STORE.types["builtin_interfaces/msg/Time"]
T0_NS = 1_700_000_000 * 10**9  # recording start, ns (arbitrary)


def _msg(t_ns, names, position, velocity, effort):
    return JOINT_STATE(header=HEADER(stamp=TIME(sec=t_ns // 10**9, nanosec=t_ns % 10**9), frame_id=""),
                       name=list(names), position=np.array(position, dtype=float),
                       velocity=np.array(velocity, dtype=float), effort=np.array(effort, dtype=float))


def torque(t):
    """Command by hand: up at 40 N m/s to 20 N m at 0.5 s, then down at 90 N m/s."""
    return 40.0 * t if t <= 0.5 else 20.0 - 90.0 * (t - 0.5)


def write_bag(path, commands=True, duration=1.0, storage=StoragePlugin.MCAP):
    """Joint 'wrist' (invented): q = 0.3 sin(2 pi t), deflection 0.05 sin(2 pi t); states at 500 Hz,
    commands at 1 kHz; an unrelated joint 'aux' without a motor entry rides along."""
    with Writer(path, version=9, storage_plugin=storage) as bag:
        states = bag.add_connection("/joint_states", JOINT_STATE.__msgtype__, typestore=STORE)
        cmd = bag.add_connection("/motor_effort", JOINT_STATE.__msgtype__, typestore=STORE) if commands else None
        for i in range(int(duration * 1000)):
            t_ns = T0_NS + i * 1_000_000
            t = i * 1e-3
            if cmd is not None:
                bag.write(cmd, t_ns, STORE.serialize_cdr(_msg(t_ns, ["wrist_motor"], [], [], [torque(t)]),
                                                         JOINT_STATE.__msgtype__))
            if i % 2 == 0:
                q, phi = 0.3 * math.sin(2 * math.pi * t), 0.05 * math.sin(2 * math.pi * t)
                m = _msg(t_ns, ["aux", "wrist", "wrist_motor"], [9.0, q, q + phi],
                         [0.0, 0.6 * math.pi * math.cos(2 * math.pi * t), 0.0], [0.0, 300.0 * phi, torque(t)])
                bag.write(states, t_ns, STORE.serialize_cdr(m, JOINT_STATE.__msgtype__))
    return path


@pytest.fixture(scope="module")
def bag(tmp_path_factory):
    return write_bag(tmp_path_factory.mktemp("bags") / "wrist_run")


def test_bag_metrics_match_the_analytic_signals(bag):
    rec = recordings.read(bag)
    assert list(rec.joints) == ["wrist"]  # 'aux' has no motor entry: not a joint
    w = rec.joints["wrist"]
    assert len(w.t) == 500 and len(w.t_cmd) == 1000
    assert w.t[0] == 0.0 and w.t_cmd[1] == pytest.approx(1e-3, abs=1e-12)
    m = recordings.metrics(rec)["wrist"]
    assert m["peak_torque_rate"] == pytest.approx(90.0, rel=1e-9)  # the steeper slope, by hand
    assert m["peak_abs_torque"] == pytest.approx(abs(torque(0.999)), rel=1e-12)  # 24.91 N m, by hand
    assert m["max_link_position"] == pytest.approx(0.3, rel=1e-12)  # crest sampled at t = 0.25 s
    assert m["min_link_position"] == pytest.approx(-0.3, rel=1e-12)  # trough at t = 0.75 s
    assert m["max_deflection"] == pytest.approx(0.05, rel=1e-9)
    assert w.tau_s[125] == pytest.approx(300.0 * 0.05, rel=1e-12)  # effort of the link entry


def test_mcap_file_reads_like_the_bag_folder(bag):
    mcap = next(bag.glob("*.mcap"))
    assert recordings.metrics(recordings.read(mcap)) == recordings.metrics(recordings.read(bag))


def test_sqlite3_bag_reads_like_the_mcap_bag(bag, tmp_path):
    db3 = write_bag(tmp_path / "wrist_db3", storage=StoragePlugin.SQLITE3)
    assert recordings.metrics(recordings.read(db3)) == recordings.metrics(recordings.read(bag))


def test_report_command_writes_table_json_and_plot(bag, tmp_path, capsys):
    assert cli.main(["report", str(bag), "--out", str(tmp_path)]) == 0
    table = capsys.readouterr().out
    assert "wrist_run" in table and "90.0" in table
    report = json.loads((tmp_path / "report.json").read_text())
    assert report["wrist_run"]["joints"]["wrist"]["peak_torque_rate"] == pytest.approx(90.0, rel=1e-9)
    png = tmp_path / "wrist_run.png"
    assert png.read_bytes()[:8] == b"\x89PNG\r\n\x1a\n"


def test_bag_without_commands_is_refused(tmp_path):
    path = write_bag(tmp_path / "no_commands", commands=False, duration=0.01)
    with pytest.raises(recordings.RecordingError, match="motor_effort"):
        recordings.read(path)
    assert cli.main(["report", str(path), "--out", str(tmp_path / "out")]) == 2


def test_csv_round_trip_matches_simulate_metrics(tmp_path):
    """simulate --csv, then report: the same metrics as simulate's own (t is written to 1 us)."""
    csv_path = tmp_path / "step.csv"
    out = subprocess.run([sys.executable, "-m", "compliant_damping.cli", "simulate", "--scenario", "setpoint_step",
                          "--duration", "0.5", "--csv", str(csv_path), "--json"],
                         capture_output=True, text=True, check=True)
    expected = json.loads(out.stdout)["joints"]["knee"]
    got = recordings.metrics(recordings.read(csv_path))["knee"]
    assert set(got) <= set(expected)
    for key, value in got.items():
        assert value == pytest.approx(expected[key], rel=1e-6, abs=1e-12), key
    assert got["peak_torque_rate"] > 0.0 and got["max_deflection"] > 0.0
    assert cli.main(["report", str(csv_path), str(csv_path), "--out", str(tmp_path / "r")]) == 0
    report = json.loads((tmp_path / "r" / "report.json").read_text())
    assert len(report) == 2  # the same file twice: two runs, two plots
    assert all((tmp_path / "r" / f"{stem}.png").exists() for stem in report)


def test_simulation_result_as_recording(tmp_path):
    """from_result (the demo's path to plots) gives simulate.metrics' own values, exactly."""
    from compliant_damping import config, controller, plots, scenarios, simulate

    ctrl, sim = config.load(config.bundled())
    scenario = scenarios.make("end_stop_impact", sim.joints)
    result = simulate.simulate(sim.joints, controller.bank(ctrl), scenario, 0.5,
                               control_dt=1.0 / ctrl.control_rate, substeps=sim.substeps)
    expected = simulate.metrics(result, scenario)["knee"]
    got = recordings.metrics(recordings.from_result(result))["knee"]
    for key, value in got.items():
        assert value == pytest.approx(expected[key], rel=1e-12), key
    png = plots.plot_run(recordings.from_result(result), tmp_path / "sim.png", title="end stop")
    assert png.read_bytes()[:4] == b"\x89PNG"
