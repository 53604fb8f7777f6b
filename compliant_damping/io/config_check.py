"""Every problem of a parameter file at once (``cdamp check-config``), with limit consistency rules.

config.controller_check and config.sim_check find the unknown keys, wrong types and impossible
values of each node section. Beyond them, two rules catch a limit that can never trip, which is
a safety check silently off:

Deflection limit the controller can never wind the spring to (``<joint>.limits.deflection``).
    The spring is in series with the motor: its torque is held by the motor side only, so with
    the command limited to ``torque`` T the static deflection is at most T / k. Dynamically the
    worst case is a blocked link (against a stop or a held load) with the motor arriving at its
    speed trip w (``motor_speed``) on a relaxed spring and pushed by T all the way: work and
    energy, ``k d^2 / 2 = B w^2 / 2 + T d``, give the largest deflection of that swing

        d_reach = T/k + sqrt((T/k)^2 + B w^2 / k)

    (k, B: the controller's nominal spring stiffness and motor inertia; w = 0 gives the factor 2
    of a suddenly applied load). A deflection limit above d_reach is reported. Motor friction
    is left out (it only resists), and an infinite ``motor_speed`` disables the rule.

Link position limit beyond the end stop's reach (``<joint>.limits.position_lower/upper``, both
sections present, per joint named in both).
    A link limit inside the end stops trips before contact; one beyond a stop trips only on
    penetration of the stop (a spring of stiffness k_s, ``stop_stiffness``). The stop is pressed
    at most by the static torque T_s = driver torque limit + gravity torque of the plant, plus
    the kinetic energy of link and motor at their speed trips (``link_speed`` v, ``motor_speed``
    w): ``k_s p^2 / 2 = (M v^2 + B w^2) / 2 + T_s p``, so the deepest penetration is

        p = T_s/k_s + sqrt((T_s/k_s)^2 + (M v^2 + B w^2) / k_s)

    (M, B: the plant's link and motor inertia; stop damping, which only shortens it, is left
    out). A limit beyond ``stop_upper + p`` (or below ``stop_lower - p``) can never trip and is
    reported. On the bundled knee p = 0.042 rad: limits of +-0.82 rad with stops at +-0.8 rad.
    Built-in joints only: on a URDF robot (the simulated section names one) the inertia and the
    gravity torque a stop meets depend on the whole posture, so this rule is not applied there.
"""
from __future__ import annotations

import math
from dataclasses import dataclass

from compliant_damping.io import config

__all__ = ["Problem", "deflection_reach", "stop_penetration", "check_files"]


@dataclass(frozen=True)
class Problem:
    """One problem of a parameter file: node section ('' for the file itself), dotted key, reason."""

    section: str
    key: str
    reason: str

    def __str__(self) -> str:
        return f"{self.section + '.' if self.section else ''}{self.key}: {self.reason}"


def deflection_reach(torque: float, stiffness: float, motor_inertia: float, motor_speed: float) -> float:
    """Largest spring deflection (rad) of one swing against a blocked link (see the module notes).

    torque N m, stiffness N m/rad, motor_inertia kg m^2, motor_speed rad/s (inf: no bound).
    """
    static = torque / stiffness
    return static + math.sqrt(static * static + motor_inertia * motor_speed ** 2 / stiffness)


def stop_penetration(press_torque: float, stop_stiffness: float, kinetic_energy: float) -> float:
    """Deepest end-stop penetration (rad) under ``press_torque`` (N m) plus ``kinetic_energy`` (J)."""
    static = press_torque / stop_stiffness
    return static + math.sqrt(static * static + 2.0 * kinetic_energy / stop_stiffness)


def _deflection_problems(setup: config.ControllerSetup) -> list:
    found = []
    for j in setup.joints:
        lim, m = j.limits, j.model
        reach = deflection_reach(lim.torque, m.spring_stiffness, m.motor_inertia, lim.motor_speed)
        if lim.deflection > reach:
            found.append(Problem(config.CONTROLLER_NODE, f"{j.name}.limits.deflection", (
                f"{lim.deflection} rad can never trip: torque {lim.torque} N m at motor_speed {lim.motor_speed} rad/s "
                f"winds the spring (k {m.spring_stiffness} N m/rad, B {m.motor_inertia} kg m^2) to at most "
                f"{reach:.4g} rad against a blocked link")))
    return found


def _stop_problems(ctrl: config.ControllerSetup, sim: config.SimSetup) -> list:
    plants = {j.name: j.plant for j in sim.joints}
    found = []
    for j in ctrl.joints:
        plant = plants.get(j.name)
        if plant is None:
            continue
        lim = j.limits
        energy = 0.5 * (plant.link_inertia * lim.link_speed ** 2 + plant.motor_inertia * lim.motor_speed ** 2)
        p = stop_penetration(plant.driver_torque_limit + abs(plant.gravity_torque), plant.stop_stiffness, energy)
        for side, limit, stop, outward in (("upper", lim.position_upper, plant.stop_upper, 1.0),
                                           ("lower", lim.position_lower, plant.stop_lower, -1.0)):
            if outward * (limit - stop) > p:
                found.append(Problem(config.CONTROLLER_NODE, f"{j.name}.limits.position_{side}", (
                    f"{limit} rad can never trip: the link reaches at most {p:.3g} rad past "
                    f"{config.SIM_NODE}.{j.name}.stop_{side} ({stop} rad) at the driver's torque and the speed limits")))
    return found


def check_files(paths) -> list:
    """Every Problem of the parameter files ``paths`` (a list) layered in order, as ROS layers them."""
    docs, found = [], []
    for path in paths:
        try:
            docs.append(config.read(path))
        except config.ConfigError as err:
            found.append(Problem("", err.key, err.reason))
    if found:
        return found
    setups = {}
    for node, check in ((config.CONTROLLER_NODE, config.controller_check), (config.SIM_NODE, config.sim_check)):
        flat = {}
        for doc in docs:
            try:
                flat.update(config.node_parameters(doc, node, required=False))
            except config.ConfigError as err:
                found.append(Problem("", err.key, err.reason))
        if flat:
            checked = check(flat)
            found += [Problem(node, e.key, e.reason) for e in checked.problems]
            setups[node] = checked.setup
    if not setups and not found:
        found.append(Problem("", str(paths[-1]), f"no section for {config.CONTROLLER_NODE} or {config.SIM_NODE}"))
    ctrl, sim = setups.get(config.CONTROLLER_NODE), setups.get(config.SIM_NODE)
    if ctrl is not None:
        found += _deflection_problems(ctrl)
    if ctrl is not None and sim is not None and sim.urdf_source is None:
        found += _stop_problems(ctrl, sim)
    return found
