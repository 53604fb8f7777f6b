"""Bundled test scenarios: initial state, link reference and scripted external torques per joint.

Scenarios scale with each joint's own end stops and spring so they make sense
for any parameter file:

``free_oscillation``  joint at rest but for an initial spring deflection; watch it ring.
``setpoint_step``     from rest at the initial position, step the set point by ``step`` rad at 0.1 s.
``end_stop_impact``   move at a constant ``impact_speed`` into the upper end stop; the reference
                      brakes only past the stop and rests ``overshoot`` beyond it, so every law
                      hits the stop at about that speed and then presses it gently. (It was a
                      sinusoid reaching 25 % past the stop; its velocity jump at the start and
                      the hard push into the stop saturated every law's torque and slew rate. A
                      rest-to-rest move was tried too: its link speed at the stop depended on each
                      law's lag, 0.3 to 1.4 rad/s, which made the comparison unfair.)
``external_impulse``  hold the initial position; a short torque pulse hits the link at 0.2 s.
"""
from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from .model import equilibrium_motor_position, pack
from .references import Constant, Cruise, Step

SCENARIOS = ("free_oscillation", "setpoint_step", "end_stop_impact", "external_impulse")


@dataclass(frozen=True)
class Scenario:
    name: str
    duration: float          # s, default run length
    initial: np.ndarray      # (n, 4) [q, q', theta, theta'] per joint
    references: tuple        # one reference object per joint (see references.py)
    external: np.ndarray     # (m, 4) rows [joint, t_on, t_off, torque] (model.advance)
    step: tuple | None = None  # (time s, size rad) of a set-point step, for step-response metrics


def make(name: str, sim_joints, *, step: float = 0.05, deflection: float = 0.02,
         impulse: float = 0.5, impulse_width: float = 0.005, overshoot: float = 0.05,
         impact_speed: float = 1.0) -> Scenario:
    """Scenario ``name`` for the simulated joints (config.SimJoint) of a parameter file.

    step: set-point step (rad); deflection: initial spring deflection (rad);
    impulse: external impulse on the link (N m s) spread over ``impulse_width`` (s);
    overshoot: how far the end_stop_impact reference rests beyond the upper stop (rad);
    impact_speed: its cruising speed into the stop (rad/s).
    """
    if name not in SCENARIOS:
        raise ValueError(f"scenario: unknown {name!r}; choose one of {', '.join(SCENARIOS)}")
    params = pack([j.plant for j in sim_joints])
    n = len(sim_joints)
    q0 = np.array([j.initial_position for j in sim_joints])
    initial = np.zeros((n, 4))
    initial[:, 0] = q0
    initial[:, 2] = [equilibrium_motor_position(params[i], q0[i]) for i in range(n)]
    external = np.zeros((0, 4))
    hold = tuple(Constant(float(q)) for q in q0)
    if name == "free_oscillation":
        initial[:, 2] += deflection
        return Scenario(name, 2.0, initial, hold, external)
    if name == "setpoint_step":
        return Scenario(name, 2.0, initial, tuple(Step(float(q), float(q) + step, 0.1) for q in q0),
                        external, step=(0.1, step))
    if name == "end_stop_impact":
        refs = []
        for j in sim_joints:
            upper = j.plant.stop_upper
            if not math.isfinite(upper):
                raise ValueError(f"{j.name}.stop_upper: end_stop_impact needs a finite upper end stop")
            # speed blends of 2 overshoot / speed: braking starts as the reference passes the stop
            refs.append(Cruise(j.initial_position, upper + overshoot, impact_speed,
                               2.0 * overshoot / impact_speed, 0.1))
        return Scenario(name, 2.0, initial, tuple(refs), external)
    rows = [[i, 0.2, 0.2 + impulse_width, impulse / impulse_width] for i in range(n)]
    return Scenario(name, 1.5, initial, hold, np.array(rows, dtype=float))
