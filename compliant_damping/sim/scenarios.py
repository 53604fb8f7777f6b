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
``track_sinusoid``    follow ``offset + amplitude sin(2 pi frequency t)`` around the initial position,
                      starting on it (position, speed and the spring's torque of the reference).
``track_move``        from rest, a rest-to-rest move of ``move`` rad over ``move_time`` s from 0.1 s
                      (references.RestToRest, continuous to the fourth derivative).
``foot_landing``      hold the initial position while the floor of the parameter file's contact
                      (a URDF frame on a plane) rises into the frame: it starts ``gap`` below the
                      frame at 0.05 s and moves up at ``landing_speed`` until ``travel`` past
                      touchdown, then stays. A moving floor gives every law the same landing
                      speed, as a drop test rig does, so their impact torques compare fairly.

Over ROS a motion goes as a trajectory through waypoints (:func:`streamed`): the spline through
its positions every STREAM_SPACING s, which the offline simulator is given to reproduce the run.
"""
from __future__ import annotations

import dataclasses
import math
from dataclasses import dataclass

import numpy as np

from compliant_damping.control.references import Constant, Cruise, RestToRest, Sinusoid, Step, spline_through
from compliant_damping.control.sample import stack_references
from compliant_damping.dynamics.links import IndependentLinks

__all__ = ["SCENARIOS", "STREAM_SPACING", "Scenario", "make", "rest_state", "streamed"]

SCENARIOS = ("free_oscillation", "setpoint_step", "end_stop_impact", "external_impulse", "track_sinusoid",
             "track_move", "foot_landing")
TRACKING = ("track_sinusoid", "track_move")  # scenarios whose metrics include the tracking error
LANDING_START = 0.05  # s: the floor starts to rise
SPEED_UP = 0.3  # s: end_stop_impact's speed ramp, gentle so the reference's feed-forward stays small
STREAM_SPACING = 0.005  # s between the waypoints of a motion streamed over ROS (:func:`streamed`)


@dataclass(frozen=True)
class Scenario:
    """A run to simulate: start state, link references, scripted torques and the floor.

    Attributes
    ----------
    name : str
    duration : float
        Default run length (s).
    initial : ndarray, shape (n, 4)
        ``[q, q', theta, theta']`` per joint (rad, rad/s).
    references : tuple
        One reference object per joint (see control/references.py).
    external : ndarray, shape (m, 4)
        Scripted link torques, rows ``[joint, t_on, t_off, torque]`` applied on [t_on, t_off) (N m).
    step : tuple or None
        (time s, size rad) of a set-point step, for step-response metrics.
    contacts : tuple
        dynamics.elastic_chain.PlaneContact of the run (the file's floor; moving in foot_landing).
    acting : tuple
        Indices of the joints the scenario moves, deflects or hits (the others hold still).
    tracking : bool
        The references move and the metrics report the tracking error.
    """

    name: str
    duration: float
    initial: np.ndarray
    references: tuple
    external: np.ndarray
    step: tuple | None = None
    contacts: tuple = ()
    acting: tuple = ()
    tracking: bool = False


def _spring_deflection(plant, torque: float) -> float:
    """Deflection phi (rad) at which the spring k phi + k3 phi^3 carries ``torque`` (N m)."""
    k, k3 = plant.spring_stiffness, plant.spring_cubic
    if k3 == 0.0:
        return torque / k
    roots = np.roots([k3, 0.0, k, -torque])  # one real root: k, k3 > 0 make the cubic monotonic
    return float(roots[np.argmin(np.abs(roots.imag))].real)


def rest_state(sim_joints, links=None) -> np.ndarray:
    """(n, 4) state at rest at the joints' initial positions, each spring carrying its link's
    gravity torque (rad, rad/s); ``links`` default to the joints' own pendulums."""
    q0 = np.array([j.initial_position for j in sim_joints], dtype=float)
    if links is None:
        links = IndependentLinks.from_params([j.name for j in sim_joints], [j.plant for j in sim_joints])
    state = np.zeros((len(q0), 4))
    state[:, 0] = q0
    state[:, 2] = q0 + [_spring_deflection(j.plant, float(g)) for j, g in zip(sim_joints, links.gravity(q0))]
    return state


def on_reference(sim_joints, links, references) -> np.ndarray:
    """(n, 4) state on the references at t = 0: the links at their position and speed, each spring
    carrying the torque that drives its link's reference motion (the links' inverse dynamics, plus
    the link viscous friction) and deflecting at that torque's rate (rad, rad/s)."""
    ref = stack_references([r.sample(0.0) for r in references])
    drive = links.driving_torque(*ref)
    viscous = np.array([j.plant.link_viscous for j in sim_joints])
    torque, rate = drive.torque + viscous * ref.dq, drive.rate + viscous * ref.ddq
    state = np.zeros((len(sim_joints), 4))
    state[:, 0], state[:, 1] = ref.q, ref.dq
    for i, j in enumerate(sim_joints):
        phi = _spring_deflection(j.plant, float(torque[i]))
        state[i, 2] = ref.q[i] + phi
        state[i, 3] = ref.dq[i] + rate[i] / (j.plant.spring_stiffness + 3.0 * j.plant.spring_cubic * phi * phi)
    return state


def make(name: str, sim_joints, *, joints=None, links=None, floor=None, step: float = 0.05, deflection: float = 0.02,
         impulse: float = 0.5, impulse_width: float = 0.005, overshoot: float = 0.05,
         impact_speed: float = 1.0, landing_speed: float = 0.35, gap: float = 0.02,
         travel: float = 0.03, amplitude: float = 0.3, frequency: float = 1.0, move: float = 0.3,
         move_time: float = 0.8) -> Scenario:
    """Scenario ``name`` for the simulated joints (config.SimJoint) of a parameter file.

    Parameters
    ----------
    sim_joints : sequence of config.SimJoint
    joints : sequence of str, optional
        Names of the joints that step, ring, hit their stop or take the impulse (default: all);
        the others hold their initial position.
    links : dynamics.links.LinkDynamics, optional
        The simulated robot's links (config.SimSetup.links); default: the joints' own pendulums.
        The start state holds them still against gravity.
    floor : dynamics.elastic_chain.PlaneContact, optional
        The parameter file's floor (config.SimSetup.contact); foot_landing needs one.
    step : float
        Set-point step (rad).
    deflection : float
        Initial spring deflection of free_oscillation (rad).
    impulse, impulse_width : float
        External impulse on each link (N m s) spread over ``impulse_width`` (s).
    overshoot, impact_speed : float
        How far the end_stop_impact reference rests beyond the upper stop (rad), and its
        cruising speed into the stop (rad/s).
    landing_speed, gap, travel : float
        foot_landing: floor speed (m/s), its start below the frame (m) and how far it moves
        past touchdown (m).
    amplitude, frequency : float
        track_sinusoid: amplitude (rad) and frequency (Hz) around the initial position.
    move, move_time : float
        track_move: distance (rad) and duration (s) of the rest-to-rest move.
    """
    if name not in SCENARIOS:
        raise ValueError(f"scenario: unknown {name!r}; choose one of {', '.join(SCENARIOS)}")
    n = len(sim_joints)
    names = [j.name for j in sim_joints]
    unknown = sorted(set(joints or ()) - set(names))
    if unknown:
        raise ValueError(f"joints: {', '.join(unknown)} not among the simulated joints {names}")
    acting = tuple(i for i, name in enumerate(names) if joints is None or name in joints)
    act = np.zeros(n, dtype=bool)
    act[list(acting)] = True
    if links is None:
        links = IndependentLinks.from_params(names, [j.plant for j in sim_joints])
    initial = rest_state(sim_joints, links)
    q0 = initial[:, 0].copy()
    external = np.zeros((0, 4))
    hold = tuple(Constant(float(q)) for q in q0)
    contacts = () if floor is None else (floor,)
    if name == "free_oscillation":
        initial[:, 2] += deflection * act
        return Scenario(name, 2.0, initial, hold, external, contacts=contacts, acting=acting)
    if name == "setpoint_step":
        refs = tuple(Step(float(q), float(q) + step, 0.1) if a else h for q, a, h in zip(q0, act, hold))
        return Scenario(name, 2.0, initial, refs, external, step=(0.1, step), contacts=contacts, acting=acting)
    if name == "track_sinusoid":
        refs = tuple(Sinusoid(float(q), amplitude, frequency) if a else h for q, a, h in zip(q0, act, hold))
        return Scenario(name, 3.0, on_reference(sim_joints, links, refs), refs, external, contacts=contacts,
                        acting=acting, tracking=True)
    if name == "track_move":
        refs = tuple(RestToRest(float(q), float(q) + move, move_time, 0.1) if a else h
                     for q, a, h in zip(q0, act, hold))
        return Scenario(name, move_time + 0.6, initial, refs, external, contacts=contacts, acting=acting,
                        tracking=True)
    if name == "foot_landing":
        if floor is None:
            raise ValueError("contact.frame: foot_landing needs a floor contact on a URDF frame")
        if not landing_speed > 0.0:
            raise ValueError(f"landing_speed: must be positive, got {landing_speed} m/s")
        height = float(np.asarray(floor.normal) @ links.frame_position(floor.frame, q0))
        moving = dataclasses.replace(floor, height=height - gap, speed=landing_speed, start_time=LANDING_START,
                                     rise_time=(gap + travel) / landing_speed)
        return Scenario(name, 2.5, initial, hold, external, contacts=(moving,), acting=tuple(range(n)))
    if name == "end_stop_impact":
        refs = list(hold)
        for i in acting:
            j = sim_joints[i]
            upper = j.plant.stop_upper
            if not math.isfinite(upper):
                raise ValueError(f"{j.name}.stop_upper: end_stop_impact needs a finite upper end stop")
            # braking over 2 overshoot / speed: it starts as the reference passes the stop
            refs[i] = Cruise(j.initial_position, upper + overshoot, impact_speed, SPEED_UP, 0.1,
                             brake=2.0 * overshoot / impact_speed)
        return Scenario(name, 2.0, initial, tuple(refs), external, contacts=contacts, acting=acting)
    rows = [[i, 0.2, 0.2 + impulse_width, impulse / impulse_width] for i in acting]
    return Scenario(name, 1.5, initial, hold, np.array(rows, dtype=float).reshape(-1, 4), contacts=contacts,
                    acting=acting)


def streamed(scenario: Scenario, spacing: float = STREAM_SPACING) -> Scenario:
    """``scenario`` as it goes over ROS: each motion replaced by the spline through its positions at
    knots ``spacing`` s apart (references.spline_through; the player sends those waypoints on
    ``link_trajectory``), set points unchanged.

    Raises ValueError, with the reason, for a motion that does not start and end at rest.
    """
    refs = tuple(r if r.set_points else spline_through(r, spacing) for r in scenario.references)
    return dataclasses.replace(scenario, references=refs)
