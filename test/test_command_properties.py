"""command_properties.check_commands on hand-made streams (values worked out by hand below)."""
from command_properties import Command, check_commands
from compliant_damping.control.safety import Limits

LIMITS = {"m": Limits(torque=10.0, torque_rate=1000.0, deflection=0.1)}  # 1 N m per ms


def test_steps_within_the_slew_allowance_pass():
    # 1 ms apart: 1 N m allowed; 3 ms gap clamps to 2 ms (2 N m); a stamp going back counts as 0 s
    stream = [Command(0.000, {"m": 0.0}), Command(0.001, {"m": 1.0}), Command(0.004, {"m": 3.0}),
              Command(0.003, {"m": 3.0})]
    assert check_commands(stream, LIMITS, 0.001) == []


def test_each_violation_is_reported():
    stream = [Command(0.000, {"m": 0.0}), Command(0.001, {"m": 1.5}),   # 1.5 N m in 1 ms: too fast
              Command(0.010, {"m": 4.0}),                               # gap clamps to 2 ms: 2.5 > 2
              Command(0.009, {"m": 4.5}),                               # older stamp: no time passed
              Command(0.011, {"m": 11.0}), Command(0.012, {"m": float("nan")}), Command(0.013, {"x": 0.0})]
    problems = check_commands(stream, LIMITS, 0.001)
    assert [p.split(":")[0] for p in problems] == [
        "message 1 (stamp 0.001000 s), m", "message 2 (stamp 0.010000 s), m", "message 3 (stamp 0.009000 s), m",
        "message 4 (stamp 0.011000 s), m", "message 4 (stamp 0.011000 s), m", "message 5 (stamp 0.012000 s), m",
        "message 6 (stamp 0.013000 s), x"]
    assert "above the limit" in problems[3] and "step" in problems[4] and "not finite" in problems[5]
