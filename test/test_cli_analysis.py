"""cdamp analyze and cdamp tune: documented JSON fields, values consistent with the library calls."""
import json
import subprocess
import sys

import pytest


def _cdamp(*args):
    out = subprocess.run([sys.executable, "-m", "compliant_damping.cli", *args], capture_output=True,
                         text=True, check=True)
    return json.loads(out.stdout)


def test_analyze_json_motor_pd_series_springs():
    """Bundled joint, motor_pd at q = 0: static stiffness k K/(k + K) + m g0 l = 150 + 2 N m/rad
    (series springs with the gravity slope in parallel, handbook formula)."""
    out = _cdamp("analyze", "--law", "motor_pd", "--json")
    assert out["law"] == "motor_pd"
    assert len(out["poles"]) == 4 and all(len(p) == 2 and p[0] < 0.0 for p in out["poles"])
    assert len(out["modes"]) == 2 and {"frequency_hz", "damping_ratio"} <= set(out["modes"][0])
    assert out["static_link_stiffness"] == pytest.approx(300.0 * 300.0 / 600.0 + 2.0, rel=1e-6)


def test_tune_json_recommends_softest_admissible_kv():
    out = _cdamp("tune", "--json", "--points", "7", "--kv-min", "50", "--kv-max", "3200")
    points = out["points"]
    assert [p["decoupling_stiffness"] for p in points] == pytest.approx([50.0 * 2.0**i for i in range(7)])
    ok = [p["decoupling_stiffness"] for p in points
          if p["stable"] and p["damping_ratio"] >= out["min_damping_ratio"] and p["within_limits"]]
    assert out["recommended_decoupling_stiffness"] == min(ok)
    # the trade-off: the stiffest k_v hits the slew limit on impact, the softest damps the link worst
    assert not points[-1]["within_limits"]
    assert points[0]["damping_ratio"] < points[-1]["damping_ratio"]
