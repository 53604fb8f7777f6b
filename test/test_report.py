"""cdamp report: recorded runs (rosbag2 MCAP bags, simulate --csv files, scenario player .npz files) to
runs.Run, metrics.JointMetrics, JSON and plots.

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

from compliant_damping import cli
from compliant_damping.io import recordings
from compliant_damping.io.metrics import STEP_FIELDS, TRACKING_FIELDS, JointMetrics, joint_metrics

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
    assert rec.joint_names == ("wrist",)  # 'aux' has no motor entry: not a joint
    assert rec.q.shape == (500, 1) and rec.tau_m.shape == (1000, 1)  # states and commands on their own clocks
    assert rec.t[0] == 0.0 and rec.t_cmd[1] == pytest.approx(1e-3, abs=1e-12)
    assert rec.faults == (None,) and rec.control_dt is None and rec.wall_time is None and rec.source == "wrist_run"
    m = joint_metrics(rec)["wrist"]
    assert m.peak_torque_rate == pytest.approx(90.0, rel=1e-9)  # the steeper slope, by hand
    assert m.peak_abs_torque == pytest.approx(abs(torque(0.999)), rel=1e-12)  # 24.91 N m, by hand
    assert m.max_link_position == pytest.approx(0.3, rel=1e-12)  # crest sampled at t = 0.25 s
    assert m.min_link_position == pytest.approx(-0.3, rel=1e-12)  # trough at t = 0.75 s
    assert m.max_deflection == pytest.approx(0.05, rel=1e-9)
    assert m.overshoot is None and m.settling_time_2pct is None  # no scenario: not a step response
    assert rec.tau_s[125, 0] == pytest.approx(300.0 * 0.05, rel=1e-12)  # effort of the link entry


def test_mcap_file_reads_like_the_bag_folder(bag):
    mcap = next(bag.glob("*.mcap"))
    assert joint_metrics(recordings.read(mcap)) == joint_metrics(recordings.read(bag))


def test_sqlite3_bag_reads_like_the_mcap_bag(bag, tmp_path):
    db3 = write_bag(tmp_path / "wrist_db3", storage=StoragePlugin.SQLITE3)
    assert joint_metrics(recordings.read(db3)) == joint_metrics(recordings.read(bag))


def test_report_command_writes_table_json_and_plot(bag, tmp_path, capsys):
    assert cli.main(["report", str(bag), "--out", str(tmp_path)]) == 0
    table = capsys.readouterr().out
    assert "wrist_run" in table and "90.0" in table
    report = json.loads((tmp_path / "report.json").read_text())
    wrist = report["wrist_run"]["joints"]["wrist"]
    assert wrist["peak_torque_rate"] == pytest.approx(90.0, rel=1e-9)
    # the report's fields as before the one metrics type: every field but the step response's
    assert list(wrist) == ["peak_abs_torque", "peak_torque_rate", "max_link_position", "min_link_position",
                           "final_link_position", "max_deflection"]
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
    got = joint_metrics(recordings.read(csv_path))["knee"].to_dict(step=False)
    assert set(got) == set(expected) - set(STEP_FIELDS) - set(TRACKING_FIELDS) - {"fault"}
    for key, value in got.items():
        assert value == pytest.approx(expected[key], rel=1e-6, abs=1e-12), key
    assert got["peak_torque_rate"] > 0.0 and got["max_deflection"] > 0.0
    assert cli.main(["report", str(csv_path), str(csv_path), "--out", str(tmp_path / "r")]) == 0
    report = json.loads((tmp_path / "r" / "report.json").read_text())
    assert len(report) == 2  # the same file twice: two runs, two plots
    assert all((tmp_path / "r" / f"{stem}.png").exists() for stem in report)


def test_simulated_run_window_and_plot(tmp_path):
    """A simulated run (t_cmd is t) cut to a window and a joint: its metrics are numpy's max/min of the
    same rows, and the torque rate is |diff tau_m| / control_dt (the slew limit of the bundled knee
    bounds it: 10000 N m/s)."""
    from compliant_damping.io import config, plots
    from compliant_damping.control import controller
    from compliant_damping.sim import scenarios, simulate

    ctrl, sim = config.load(config.bundled())
    scenario = scenarios.make("end_stop_impact", sim.joints)
    run = simulate.simulate(sim.joints, controller.bank(ctrl), scenario, 0.5,
                            control_dt=1.0 / ctrl.control_rate, substeps=sim.substeps)
    assert run.t_cmd is run.t and run.control_dt == 1.0 / ctrl.control_rate and run.source == "simulation"
    part = run.window(0.2, 0.3, ["knee"])
    rows = (run.t >= 0.2) & (run.t <= 0.3)
    assert len(part.t) == 101 and part.joint_names == ("knee",)  # 0.200 .. 0.300 s at 1 kHz
    m = joint_metrics(part)["knee"]
    tau = run.tau_m[rows, 0]
    assert m.peak_abs_torque == np.max(np.abs(tau))
    assert m.peak_torque_rate == pytest.approx(np.max(np.abs(np.diff(tau))) / run.control_dt, rel=1e-12)
    assert 0.0 < m.peak_torque_rate <= ctrl.joints[0].limits.torque_rate * (1 + 1e-9)
    assert m.max_link_position == np.max(run.q[rows, 0]) and m.final_link_position == run.q[rows, 0][-1]
    png = plots.plot_runs({"whole": run, "window": part}, tmp_path / "sim.png", title="end stop")
    assert png.read_bytes()[:4] == b"\x89PNG"


def test_player_npz_reads_as_a_run(tmp_path):
    """The scenario player's .npz layout (nodes/scenario_player.py) with analytic series: a ramp command
    of 5 N m/s and link positions 0.1 t; joint-major columns and the file's control_dt come back."""
    t = np.arange(11) * 0.01
    q = np.stack([0.1 * t, -0.1 * t], axis=1)
    arrays = {"q": q, "dq": np.full_like(q, 0.1), "theta": q + 0.02, "dtheta": np.zeros_like(q),
              "tau_s": np.zeros_like(q), "t": t, "t_cmd": t, "tau_m": np.stack([5.0 * t, -5.0 * t], axis=1)}
    path = tmp_path / "run.npz"
    np.savez(path, joint_names=np.array(["hip", "knee"]), control_dt=np.array(0.01), **arrays)
    run = recordings.read(path)
    assert run.joint_names == ("hip", "knee") and run.control_dt == 0.01 and run.faults == (None, None)
    m = joint_metrics(run)
    assert m["knee"].peak_torque_rate == pytest.approx(5.0, rel=1e-12)  # the ramp's slope, by hand
    assert m["knee"].min_link_position == pytest.approx(-0.01, rel=1e-12)  # -0.1 rad/s for 0.1 s
    assert m["hip"].max_deflection == pytest.approx(0.02, rel=1e-12)
    np.savez(path, joint_names=np.array(["hip", "knee"]), **{k: v for k, v in arrays.items() if k != "t_cmd"})
    with pytest.raises(recordings.RecordingError, match="t_cmd"):
        recordings.read(path)


def test_bag_joints_share_their_messages(tmp_path):
    """A joint_states message naming one joint of the run but not the other is refused (one time base)."""
    with Writer(tmp_path / "split", version=9, storage_plugin=StoragePlugin.MCAP) as bag:
        states = bag.add_connection("/joint_states", JOINT_STATE.__msgtype__, typestore=STORE)
        cmd = bag.add_connection("/motor_effort", JOINT_STATE.__msgtype__, typestore=STORE)
        for i, names in enumerate((["hip", "hip_motor", "knee", "knee_motor"], ["hip", "hip_motor"])):
            t_ns = T0_NS + i * 1_000_000
            bag.write(states, t_ns, STORE.serialize_cdr(_msg(t_ns, names, [0.0] * len(names), [0.0] * len(names),
                                                             [0.0] * len(names)), JOINT_STATE.__msgtype__))
            bag.write(cmd, t_ns, STORE.serialize_cdr(_msg(t_ns, ["hip_motor", "knee_motor"], [], [], [1.0, 2.0]),
                                                     JOINT_STATE.__msgtype__))
    with pytest.raises(recordings.RecordingError, match="'knee'"):
        recordings.read(tmp_path / "split")


def test_run_and_metrics_types_check_themselves():
    """Run refuses arrays that do not match its joints; JointMetrics.to_dict keeps the declaration order
    (the JSON field order of cdamp simulate)."""
    from compliant_damping.io.runs import Run

    t, col = np.arange(3) * 0.1, np.zeros((3, 1))
    with pytest.raises(ValueError, match="tau_m"):
        Run("test", ("knee",), t, col, col, col, col, col, t, np.zeros((3, 2)), (None,))
    with pytest.raises(TypeError, match="Fault"):
        Run("test", ("knee",), t, col, col, col, col, col, t, col, ("joint limit",))
    m = JointMetrics(1.0, 2.0, 3.0, 4.0, 5.0, 6.0)
    assert list(m.to_dict()) == ["peak_abs_torque", "peak_torque_rate", "max_link_position", "min_link_position",
                                 "final_link_position", "max_deflection", "overshoot", "settling_time_2pct",
                                 "tracking_rms", "tracking_peak"]
    assert m.to_dict()["overshoot"] is None and "overshoot" not in m.to_dict(step=False)
