"""The command-line tool runs the bundled scenario and reports the documented JSON fields."""
import json
import os
import subprocess
import sys


def test_simulate_json_fields():
    out = subprocess.run([sys.executable, "-m", "compliant_damping.cli", "simulate", "--law", "zero",
                          "--scenario", "free_oscillation", "--json"], capture_output=True, text=True, check=True)
    summary = json.loads(out.stdout)
    assert summary["law"] == "zero" and summary["scenario"] == "free_oscillation"
    knee = summary["joints"]["knee"]
    assert knee["peak_abs_torque"] == 0.0  # zero law: no torque at all
    assert knee["overshoot"] is None and knee["settling_time_2pct"] is None
    # initial deflection 0.02 rad, no torque: the link swings forward past its start
    assert 0.0 < knee["max_link_position"] < 0.05


def test_closed_pipe_exits_without_traceback():
    """`cdamp keys | head`: the reader is gone. Python's documented recipe ("Note on SIGPIPE" in the
    signal module docs) is exit status 1 and no traceback; the read end is closed before the start,
    so every write fails with EPIPE."""
    read_end, write_end = os.pipe()
    os.close(read_end)
    try:
        out = subprocess.run([sys.executable, "-m", "compliant_damping.cli", "keys"], stdout=write_end,
                             stderr=subprocess.PIPE, text=True, timeout=60)
    finally:
        os.close(write_end)
    assert out.returncode == 1
    assert out.stderr == ""
