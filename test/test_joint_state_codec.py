"""Pure parts of the ROS shell: joint-state decoding, tick timing, plant stepping."""
import math

import numpy as np
import pytest

from compliant_damping.io import config
from compliant_damping.io.joint_state_codec import (Rejection, StateDecoder, Stamp, StampOrder,
                                                    TickClock, encode_states, pick_values)
from compliant_damping.sim.plant import Plant
from compliant_damping.control.sample import JointSample

CTRL, SIM = config.load(config.bundled())
JOINT_LIMITS = CTRL.joints[0].limits
NAMES = ["knee", "knee_motor"]


def test_decoder_reads_link_and_motor_entries_in_any_order():
    dec = StateDecoder(CTRL.joints, spring_torque_from_effort=True)
    samples = dec.decode(["knee_motor", "knee"], [0.3, 0.2], [1.5, 1.0], [7.0, 6.0])
    assert samples == [JointSample(0.2, 1.0, 0.3, 1.5, 6.0)] and dec.rejected == 0


@pytest.mark.parametrize("fields, said", [
    ((NAMES, [0.0], [0.0, 0.0], []), "lengths"),
    ((NAMES, [0.0, 0.0], [0.0, 0.0], [0.0]), "lengths"),
    ((["knee"], [0.0], [0.0], []), "knee_motor"),
    ((["knee", "knee"], [0.0, 0.0], [0.0, 0.0], []), "repeated"),
    ((NAMES, [math.nan, 0.0], [0.0, 0.0], []), "non-finite"),
    ((NAMES, [0.0, 0.0], [0.0, -math.inf], []), "non-finite"),
])
def test_decoder_rejects_with_a_reason_and_counts(fields, said):
    dec = StateDecoder(CTRL.joints, spring_torque_from_effort=False)
    got = dec.decode(*fields)
    assert isinstance(got, Rejection) and said in got.reason and dec.rejected == 1 and dec.last_rejection == got


def test_effort_source_needs_a_finite_effort():
    dec = StateDecoder(CTRL.joints, spring_torque_from_effort=True)
    assert "no effort" in dec.decode(NAMES, [0.0, 0.0], [0.0, 0.0], []).reason
    assert "non-finite" in dec.decode(NAMES, [0.0, 0.0], [0.0, 0.0], [math.nan, 0.0]).reason
    plain = StateDecoder(CTRL.joints, spring_torque_from_effort=False)
    assert plain.decode(NAMES, [0.0, 0.0], [0.0, 0.0], [math.nan, 0.0])[0].tau_s is None  # not measured


def test_encode_then_decode_round_trip():
    s = JointSample(0.1, -0.2, 0.15, 0.3, 12.0)
    name, pos, vel, eff = encode_states(["knee"], [s], [4.0])
    assert StateDecoder(CTRL.joints, True).decode(name, pos, vel, eff) == [s] and eff == [12.0, 4.0]


def test_pick_values():
    assert pick_values(["b", "a"], [2.0, 1.0], ["a", "c"]) == [1.0, None]
    assert "names" in pick_values(["a"], [], ["a"]).reason
    assert "non-finite" in pick_values(["a"], [math.inf], ["a"]).reason
    assert "repeated" in pick_values(["a", "a"], [1.0, 2.0], ["a"]).reason


def test_stamp_order_classifies_repeats_backwards_and_far_ahead():
    order = StampOrder(ahead_tolerance=0.05)
    assert order.classify(1.0, 1.0) is Stamp.NEW
    order.accept(1.0)
    assert order.classify(1.0, 1.001) is Stamp.REPEATED
    assert order.classify(0.999, 1.001) is Stamp.OLDER
    assert order.classify(1.0511, 1.001) is Stamp.AHEAD and order.classify(1.05, 1.001) is Stamp.NEW
    assert "ahead of the clock" in order.rejection(Stamp.AHEAD, 3.0, 1.0).reason


def test_tick_clock_clamps_and_counts_late_ticks():
    clock = TickClock(1e-3)
    dts = [clock.interval(t) for t in (0.0, 0.001, 0.0011, 0.0055, 0.0065)]
    assert dts == pytest.approx([1e-3, 1e-3, 0.1e-3, 2e-3, 1e-3])
    assert clock.late == 1
    assert clock.rate() == pytest.approx(4 / 0.0065) and clock.rate() == 0.0


def test_plant_impulse_changes_link_momentum_by_the_impulse():
    # Impulse-momentum theorem: M * delta q' = J, up to the spring torque during the one-period
    # pulse T: the link starts at rest in equilibrium and moves q(t) = J t^2 / (2 M T), so the
    # spring takes k J T^2 / (6 M) = 2e-4 J of it here (gravity's slope is far smaller than k).
    plant = Plant(SIM)
    impulse, m = 0.01, SIM.joints[0].plant.link_inertia
    plant.add_impulse(0, impulse, plant.t)
    plant.advance(SIM.links.gravity(plant.x[:, 0]))  # the motor holds gravity
    assert plant.x[0, 1] == pytest.approx(impulse / m, rel=1e-3)
    assert len(plant.external) == 0  # the pulse is over


def test_plant_held_torque_starts_at_its_time_and_is_replaced():
    plant = Plant(SIM)
    plant.hold_torque(0, 1.0, 0.002)
    plant.advance([0.0])
    assert plant.x[0, 1] == 0.0  # not yet
    plant.hold_torque(0, -1.0, 0.004)
    assert np.array_equal(plant.external[:, 2], [0.004, math.inf])
