"""cdamp analyze and cdamp tune: documented JSON fields, values consistent with the library calls."""
import json
import subprocess
import sys

import numpy as np
import pytest

STIFF_KV_LAYER = """/**/damping_controller:
  ros__parameters:
    knee:
      gains:
        decoupling_stiffness: 5000.0
"""


def _run(*args):
    return subprocess.run([sys.executable, "-m", "compliant_damping.cli", *args], capture_output=True,
                          text=True, check=True).stdout


def _cdamp(*args):
    return json.loads(_run(*args))


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
    # the trade-off: the stiffest k_v hits the slew limit on impact, the softest damps the link worst; in the
    # continuous view the stiffest damps best, but the loop sampled at 1 kHz is unstable there
    assert not points[-1]["within_limits"]
    best = next(p for p in points if p["decoupling_stiffness"] == out["recommended_decoupling_stiffness"])
    assert points[0]["damping_ratio"] < best["damping_ratio"]
    assert points[0]["continuous_damping_ratio"] < points[-1]["continuous_damping_ratio"]
    assert not points[-1]["stable"]


def test_analyze_stiff_decoupling_spring_sampled_loop_decides(tmp_path):
    """Bundled joint, decoupled_damper with k_v = 5000 N m/rad: the continuous view is stable, the loop sampled
    at the file's 1 kHz is not (python-control check in test_sampled_analysis.py); the sampled one decides.
    The equivalent poles are s = ln(z)/T of the eigenvalues (definition)."""
    layer = tmp_path / "stiff.yaml"
    layer.write_text(STIFF_KV_LAYER)
    out = _cdamp("analyze", "--layer", str(layer), "--json")
    disc = out["sampled"]
    assert out["continuous_stable"] and out["decided_by"] == "sampled"
    assert disc["control_rate_hz"] == 1000.0 and disc["substeps"] == 10 and disc["delay_ticks"] == [0]
    assert not disc["stable"] and disc["spectral_radius"] > 1.0
    z = np.array([complex(*e) for e in disc["eigenvalues"]])
    assert disc["spectral_radius"] == pytest.approx(np.abs(z).max())
    worst = disc["modes"][disc["least_damped_mode"]]
    s = np.log(complex(*worst["z"])) * disc["control_rate_hz"]
    assert worst["frequency_hz"] == pytest.approx(abs(s) / (2 * np.pi)) and worst["damping_ratio"] < 0.0
    assert worst["damping_ratio"] == pytest.approx(-s.real / abs(s))
    text = _run("analyze", "--layer", str(layer))
    assert "continuous view: stable" in text and "sampled at 1000 Hz decides: UNSTABLE" in text


def test_analyze_robot_json_has_the_sampled_loop():
    """URDF leg: the sampled verdict agrees with its eigenvalues (|z| < 1 iff stable) and every mode carries
    joint shares whose squares sum to 1 (or all zero)."""
    pytest.importorskip("pinocchio", reason="URDF chains need Pinocchio (the pin package)")
    from compliant_damping.io import config
    out = _cdamp("analyze", "--config", str(config.bundled().parent / "compliant_leg.yaml"), "--json")
    disc = out["sampled"]
    assert disc["stable"] == (disc["spectral_radius"] < 1.0) and out["stable"]
    for m in disc["modes"]:
        assert len(m["joint_shares"]) == 3
        assert sum(v * v for v in m["joint_shares"]) == pytest.approx(1.0) or not any(m["joint_shares"])


def test_tune_marks_unstable_points_and_never_recommends_one():
    """Sweep up to 1e4 N m/rad at 1 kHz: the stiff end is unstable on the sampled loop though the continuous
    view calls it damped; the boundary lies between the last stable and the first unstable point."""
    out = _cdamp("tune", "--json", "--points", "5", "--kv-min", "100", "--kv-max", "10000")
    points = out["points"]
    assert out["judged_on"] == "sampled" and out["control_rate_hz"] == 1000.0
    bad = [p for p in points if not p["stable"]]
    assert bad and bad[-1]["continuous_damping_ratio"] > 0.3 and bad[-1]["spectral_radius"] > 1.0
    first = min(p["decoupling_stiffness"] for p in bad)
    assert out["first_unstable_decoupling_stiffness"] == first
    last_stable = max(p["decoupling_stiffness"] for p in points if p["stable"] and p["decoupling_stiffness"] < first)
    assert last_stable < out["stability_boundary_decoupling_stiffness"] <= first
    assert out["recommended_decoupling_stiffness"] not in [p["decoupling_stiffness"] for p in bad]


def test_the_documented_damping_ratios_and_the_tuned_spring_of_the_bundled_knee():
    """The numbers README.md and config/one_joint.yaml state: least-damped mode of the continuous
    loop 0.44 (link_damping), 0.41 (decoupled_damper), 0.24 (motor_pd), each within 0.01 of the
    sampled loop's at 1 kHz; `cdamp tune` (default sweep) recommends about the file's k_v = 200 N m/rad
    as the softest that keeps the sampled damping ratio at 0.4."""
    documented = {"link_damping": 0.44, "decoupled_damper": 0.41, "motor_pd": 0.24}
    for law, zeta in documented.items():
        out = _cdamp("analyze", "--law", law, "--json")
        continuous = min(m["damping_ratio"] for m in out["modes"])
        sampled = min(m["damping_ratio"] for m in out["sampled"]["modes"])
        assert continuous == pytest.approx(zeta, abs=0.005) and sampled == pytest.approx(continuous, abs=0.011)
    tuned = _cdamp("tune", "--json")["recommended_decoupling_stiffness"]
    assert tuned == pytest.approx(200.0, rel=0.01)
