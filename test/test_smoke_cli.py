"""The command-line tool runs the bundled scenario and reports the documented JSON fields."""
import json
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
