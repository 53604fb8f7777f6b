"""The law a controller runs, its gains and their ramp: law switching and gain ramps, bumpless,
shared by controller.JointController (floats) and controller.RobotController (per-joint arrays)."""
from __future__ import annotations

import math
from dataclasses import fields

import numpy as np

from compliant_damping.control.law_runner import LawRunner
from compliant_damping.control.laws import Gains, check_gains, make_law

__all__ = ["ScheduledLaw", "blend_gains"]


def blend_gains(old: Gains, new: Gains, w: float, motor_inertia) -> Gains:
    """Gains a fraction ``w`` (0..1) of the way from ``old`` to ``new``; floats or per-joint arrays.

    An unset motor inertia target (0) blends as the nominal motor inertia (kg m^2, one per
    joint for arrays), which is the same law, so shaping fades in without a jump. The damper's
    order cannot blend: where either virtual mass is 0 the new one applies at once.
    """
    def value(name, g):
        v = getattr(g, name)
        return np.where(v == 0.0, motor_inertia, v) if name == "motor_inertia_target" else v
    mixed = {f.name: (1.0 - w) * value(f.name, old) + w * value(f.name, new) for f in fields(Gains)}
    mixed["virtual_mass"] = np.where((new.virtual_mass == 0.0) | (old.virtual_mass == 0.0), new.virtual_mass,
                                     mixed["virtual_mass"])
    if np.ndim(new.motor_stiffness) == 0:  # one joint: the float laws keep plain floats
        mixed = {k: float(v) for k, v in mixed.items()}
    return Gains(**mixed)


class ScheduledLaw:
    """The law, its gains and their ramp, shared by :class:`JointController` and :class:`RobotController`.

    Law switches and gain changes restart or retune the running law (law_runner.LawRunner) bumpless:
    a switch restarts the states to reproduce the last command; a ramp moves the gains linearly
    in stamp time, keeping the states while their number is unchanged.
    """

    def __init__(self, law: str, model, gains: Gains, torque_sensor: bool):
        check_gains(law, gains)
        self.law_name, self.model, self.gains = law, model, gains
        self.torque_sensor = torque_sensor
        self._runner: LawRunner | None = None   # built on the first good reading
        self._ramp = None                       # (from gains, start time s, duration s)

    def switch_law(self, law: str, gains: Gains | None = None) -> None:
        """Change law (and gains) at once, bumpless: states restart to reproduce the last command."""
        gains = self.gains if gains is None else gains
        check_gains(law, gains)
        self.law_name, self.gains, self._ramp, self._runner = law, gains, None, None

    def set_gains(self, gains: Gains, t: float, ramp_time: float) -> None:
        """Move to ``gains`` linearly over ``ramp_time`` s from stamp time ``t`` (s)."""
        check_gains(self.law_name, gains)
        start = self._runner.law.gains if self._runner is not None else self.gains
        self.gains = gains
        self._ramp = (start, t, ramp_time) if ramp_time > 0.0 else None
        if self._runner is not None and self._ramp is None:
            self._rebuild(gains)

    def _last_command(self):
        """The last torque command sent (N m; one per joint for a robot), for a bumpless start."""
        raise NotImplementedError

    def _run_law(self, s, ref, t: float, dt: float):
        """The law's torque for reading ``s`` at stamp time ``t``, its states advanced by ``dt`` s."""
        gains = self._apply_ramp(t)
        if self._runner is None:
            self._runner = LawRunner(make_law(self.law_name, self.model, gains, self.torque_sensor), s, ref,
                                     previous_torque=self._last_command())
        return self._runner.step(s, ref, dt if math.isfinite(dt) and dt > 0.0 else 0.0)  # NaN dt: hold

    def _apply_ramp(self, t) -> Gains:
        """Gains in effect at ``t`` (s); a running law follows the ramp, a new one starts on it."""
        if self._ramp is None:
            return self.gains
        start, t0, duration = self._ramp
        w = min(max((t - t0) / duration, 0.0), 1.0)
        gains = blend_gains(start, self.gains, w, self.model.motor_inertia)
        if self._runner is not None:
            self._rebuild(gains)
        if w >= 1.0:
            self._ramp = None
        return gains

    def _rebuild(self, gains: Gains):
        """Swap the running law's gains, keeping its states when their number is unchanged."""
        law = make_law(self.law_name, self.model, gains, self.torque_sensor)
        if law.n_states != self._runner.law.n_states:
            self._runner = None  # re-initialised bumpless on this tick
            return
        self._runner.set_law(law)
