"""The controllers: the chosen law, then the safety filter. Nothing else sends torque.

JointController runs one joint on its own (the built-in bench joints); RobotController runs
every joint of a robot with coupled links at once, a safety filter per joint. JointBank holds
the bench's JointControllers behind RobotController's robot-wide interface, so a caller (the
ROS controller node) drives either through one API: :func:`build` picks the one a setup needs.

Used tick by tick by the offline simulator and the ROS controller node alike. Times are the
stamp times of the readings (s): the safety filter makes them monotonic for the slew limit.
"""
from __future__ import annotations

from dataclasses import dataclass, fields

import numpy as np

from compliant_damping.control.laws import ChainNominal, Gains, NominalModel, check_gains
from compliant_damping.control.safety import Fault, FaultCode, Limits, SafetyFilter, motor_accel_bound
from compliant_damping.control.sample import JointSample, Reference
from compliant_damping.control.scheduled_law import ScheduledLaw

__all__ = ["JointBank", "JointController", "JointFault", "RobotController", "bank", "build",
           "chain_nominal", "joint_bank", "robot", "stack_gains"]


@dataclass(frozen=True)
class JointFault:
    """A joint's fault: the joint's name and what holds it in safe mode."""

    joint: str
    fault: Fault

    def __str__(self) -> str:
        return f"{self.joint}: {self.fault}"


def _newest(times) -> float | None:
    """Newest of the stamp times ``times`` (s) that are set, or None."""
    times = [t for t in times if t is not None]
    return max(times) if times else None


class JointController(ScheduledLaw):
    """Law + safety filter for one joint, with bumpless law switching and gain ramps.

    Parameters
    ----------
    law : str
        One of laws.LAW_NAMES.
    model : NominalModel
    gains : Gains
    limits : Limits
    safe_mode : str
        One of safety.SAFE_MODES.
    torque_sensor : bool
        The laws take the spring torque from the reading (laws.make_law).
    period : float
        Nominal control period (s), for the safety filter's slew budget.
    """

    def __init__(self, law: str, model: NominalModel, gains: Gains, limits: Limits,
                 safe_mode: str = "zero_torque", torque_sensor: bool = False, period: float = 1e-3):
        super().__init__(law, model, gains, torque_sensor)
        self.safety = SafetyFilter(limits, safe_mode, period, self._accel_bound(limits), torque_sensor)

    @property
    def fault(self) -> Fault | None:
        return self.safety.fault

    @property
    def last_command_time(self) -> float | None:
        """Stamp time (s) of the newest command sent, None before the first."""
        return self.safety.last_time

    def _accel_bound(self, limits: Limits) -> float:
        return motor_accel_bound(limits, self.model.motor_inertia, self.model.spring_stiffness)

    def _last_command(self) -> float:
        return self.safety.last_torque

    def step(self, s: JointSample, ref, t: float, dt: float) -> float:
        """Motor torque command (N m) for reading ``s``, reference ``ref`` (sample.Reference), at stamp time ``t``.

        ``dt`` (s) advances the law's states; the slew limit counts stamp time (safety.SafetyFilter).
        A reference position outside the position limits is clipped to the nearer limit (its
        derivatives kept, as joint_state_codec.ReferenceSchedule does), offline and over ROS alike.
        """
        tau = None  # in fault or on a bad reading the filter commands the safe torque
        fault = self.safety.check(s)
        if self.safety.fault is None and fault is None:
            if not ref.is_finite():  # laws cannot take it (math.sin(inf) raises)
                self.safety.trip(Fault(FaultCode.NON_FINITE_REFERENCE, "non-finite reference"))
            else:
                lim = self.safety.limits
                if not lim.position_lower <= ref.q <= lim.position_upper:
                    ref = ref._replace(q=min(max(ref.q, lim.position_lower), lim.position_upper))
                tau = self._run_law(s, ref, t, dt)
        return self.safety.filter_checked(s, fault, tau, t)

    def ramp_down(self, t: float) -> float:
        """Command (N m) at stamp time ``t`` without a fresh reading: towards zero at the slew limit."""
        return self.safety.ramp_down(t)

    def trip(self, fault: Fault) -> None:
        """Enter safe mode now with ``fault`` (the watchdog, a stopped clock, a command conflict)."""
        self.safety.trip(fault)

    def stop(self, reason: str = "stop requested") -> None:
        """Enter safe mode now on request."""
        self.safety.trip(Fault(FaultCode.STOP_REQUESTED, reason))

    def reset(self) -> Fault | None:
        """Leave safe mode if the last reading is within limits (returns the fault that stays, if any).

        The law restarts from the measured state, bumpless from the last command.
        """
        fault = self.safety.reset()
        if fault is None:
            self._runner = None
        return fault

    def restart_law(self) -> None:
        """Out of fault: restart the law from the measured state, bumpless from the last command
        (on activation), when the last reading is within limits. A fault stays until :meth:`reset`."""
        if self.safety.fault is None:
            self.reset()

    def set_limits(self, limits: Limits) -> None:
        """New safety limits from the next tick (a lowered torque limit applies at once)."""
        self.safety.limits = limits
        self.safety.accel_bound = self._accel_bound(limits)


def bank(setup) -> list:
    """One JointController per joint of a :class:`config.ControllerSetup`."""
    sensor = setup.spring_torque_source == "effort"
    return [JointController(setup.law, j.model, j.gains, j.limits, setup.safe_mode, sensor, 1.0 / setup.control_rate)
            for j in setup.joints]


class JointBank:
    """Independent joints (the built-in bench), one :class:`JointController` each, driven with
    :class:`RobotController`'s robot-wide interface.

    Every joint keeps its own law states, faults and resets, exactly as when stepped one by one
    (offline, simulate.simulate steps the same controllers): a fault on one joint leaves the
    others running. Indexing and iteration give the JointControllers in joint order.

    Parameters
    ----------
    controllers : sequence of JointController
        Per joint, all on the same law.
    joint_names : sequence of str
        For the faults a reset leaves.
    """

    def __init__(self, controllers, joint_names):
        self.controllers, self.joint_names = list(controllers), list(joint_names)

    def __len__(self) -> int:
        return len(self.controllers)

    def __getitem__(self, j: int) -> JointController:
        return self.controllers[j]

    def __iter__(self):
        return iter(self.controllers)

    @property
    def law_name(self) -> str:
        return self.controllers[0].law_name

    @property
    def filters(self) -> list:
        """Safety filter per joint (safety.SafetyFilter)."""
        return [c.safety for c in self.controllers]

    @property
    def faults(self) -> list:
        """Fault per joint (None where none)."""
        return [c.fault for c in self.controllers]

    @property
    def last_command_time(self) -> float | None:
        """Stamp time (s) of the newest command sent, None before the first."""
        return _newest(c.last_command_time for c in self.controllers)

    def step(self, readings, ref, t: float, dt: float) -> np.ndarray:
        """Motor torques (N m) for the per-joint readings at stamp time ``t``; ``ref``: a sample.Reference of arrays.

        Each joint's JointController.step takes its own reading and its entries of ``ref`` as floats.
        """
        n = len(self.controllers)
        refs = zip(*(np.broadcast_to(np.asarray(r, dtype=float), (n,)).tolist() for r in ref))  # per joint
        return np.array([c.step(s, Reference(*r), t, dt) for c, s, r in zip(self.controllers, readings, refs)])

    def ramp_down(self, t: float) -> np.ndarray:
        """Commands (N m) at stamp time ``t`` without fresh readings: towards zero at each slew limit."""
        return np.array([c.ramp_down(t) for c in self.controllers])

    def trip(self, fault: Fault) -> None:
        """Every joint to safe mode with ``fault``."""
        for c in self.controllers:
            c.trip(fault)

    def stop(self, reason: str = "stop requested") -> None:
        """Every joint to safe mode now on request."""
        for c in self.controllers:
            c.stop(reason)

    def reset(self) -> list:
        """Clear each joint's fault where its last reading is within limits; returns the JointFaults that stay."""
        staying = [(name, c.reset()) for name, c in zip(self.joint_names, self.controllers)]
        return [JointFault(name, fault) for name, fault in staying if fault is not None]

    def restart_law(self) -> None:
        """JointController.restart_law on every joint."""
        for c in self.controllers:
            c.restart_law()

    def switch_law(self, law: str, gains=None) -> None:
        """Change law (and per-joint gains, joint order) at once, bumpless for every joint."""
        for j, c in enumerate(self.controllers):
            c.switch_law(law, None if gains is None else gains[j])

    def set_gains(self, gains, t: float, ramp_time: float) -> None:
        """Move each joint whose gains change (sequence, joint order) to them over ``ramp_time`` s from ``t``;
        a joint whose target stays the same keeps its law (and any ramp under way) untouched."""
        for c, g in zip(self.controllers, gains):
            if g != c.gains:
                c.set_gains(g, t, ramp_time)

    def set_limits(self, limits) -> None:
        """New per-joint safety limits from the next tick (a lowered torque limit applies at once)."""
        for c, lim in zip(self.controllers, limits):
            c.set_limits(lim)


def joint_bank(setup) -> JointBank:
    """The JointBank of a :class:`config.ControllerSetup` of built-in joints (the controllers of :func:`bank`)."""
    return JointBank(bank(setup), setup.joint_names)


class RobotController(ScheduledLaw):
    """One law for a robot with coupled links, a safety filter per joint; nothing else sends torque.

    The law runs on all joints at once (laws.ChainNominal, per-joint gains stacked as arrays);
    each joint's command passes its own safety.SafetyFilter. A fault on one joint puts every
    joint in safe mode: the others trip with ``FaultCode.OTHER_JOINT`` naming it, and the law
    is not run on a tick whose readings violate a limit. Bumpless start, law switching and gain
    ramps work for the whole robot as for one joint (:class:`JointController`): the law's states
    are chosen so that its first torques equal the last commands.

    Parameters
    ----------
    law : str
        One of laws.LAW_NAMES.
    model : laws.ChainNominal
    gains : sequence of Gains
        Per joint.
    limits : sequence of Limits
        Per joint.
    joint_names : sequence of str
        For the fault reasons.
    safe_mode, torque_sensor, period
        As for :class:`JointController`.
    """

    def __init__(self, law: str, model, gains, limits, joint_names, safe_mode: str = "zero_torque",
                 torque_sensor: bool = False, period: float = 1e-3):
        super().__init__(law, model, self._stacked(law, gains), torque_sensor)
        self.joint_names = list(joint_names)
        self.filters = [SafetyFilter(lim, safe_mode, period, motor_accel_bound(lim, b, k), torque_sensor)
                        for lim, b, k in zip(limits, model.motor_inertia, model.spring_stiffness)]
        self._clip_limits()

    @staticmethod
    def _stacked(law: str, gains) -> Gains:
        """Per-joint gains checked one by one, then stacked (the damper order must agree across joints)."""
        for g in gains:
            check_gains(law, g)
        return stack_gains(gains)

    def _clip_limits(self) -> None:
        self._lower = np.array([f.limits.position_lower for f in self.filters])  # reference clipping, rad
        self._upper = np.array([f.limits.position_upper for f in self.filters])

    @property
    def faults(self) -> list:
        """Fault per joint (None where none)."""
        return [f.fault for f in self.filters]

    @property
    def last_command_time(self) -> float | None:
        """Stamp time (s) of the newest command sent, None before the first."""
        return _newest(f.last_time for f in self.filters)

    def _last_command(self) -> np.ndarray:
        return np.array([f.last_torque for f in self.filters])

    def step(self, readings, ref, t: float, dt: float) -> np.ndarray:
        """Motor torques (N m) for the per-joint readings at stamp time ``t``; ``ref``: a sample.Reference of arrays.

        Each reading is checked once (safety.SafetyFilter.check); the law runs only when every joint
        is out of fault with a reading within limits and the reference is finite.
        """
        checks = [f.check(s) for f, s in zip(self.filters, readings)]
        ref_finite = ref.is_finite()
        tau = [None] * len(readings)
        if ref_finite and all(c is None for c in checks) and all(f.fault is None for f in self.filters):
            s = JointSample(*np.array(readings, dtype=float).T)
            ref = ref._replace(q=np.minimum(np.maximum(ref.q, self._lower), self._upper))  # clipped
            tau = self._run_law(s, ref, t, dt).tolist()
        elif not ref_finite and self.filters[0].fault is None:
            self.filters[0].trip(Fault(FaultCode.NON_FINITE_REFERENCE, "non-finite reference"))
        out = np.array([f.filter_checked(s, fault, tau_j, t)
                        for f, s, fault, tau_j in zip(self.filters, readings, checks, tau)])
        self._spread_faults()
        return out

    def _spread_faults(self) -> None:
        first = next(((name, f.fault) for name, f in zip(self.joint_names, self.filters) if f.fault is not None), None)
        if first is None:
            return
        name, fault = first
        for f in self.filters:
            f.trip(Fault(FaultCode.OTHER_JOINT, f"{name}: {fault}"))

    def ramp_down(self, t: float) -> np.ndarray:
        """Commands (N m) at stamp time ``t`` without fresh readings: towards zero at each slew limit."""
        return np.array([f.ramp_down(t) for f in self.filters])

    def trip(self, fault: Fault) -> None:
        """Every joint to safe mode with ``fault``."""
        for f in self.filters:
            f.trip(fault)

    def stop(self, reason: str = "stop requested") -> None:
        """Every joint to safe mode now on request."""
        self.trip(Fault(FaultCode.STOP_REQUESTED, reason))

    def reset(self) -> list:
        """Clear the faults if every joint's last reading is within limits; returns the JointFaults that stay."""
        staying = [JointFault(name, b) for name, b in zip(self.joint_names, (f.blocking() for f in self.filters))
                   if b is not None]
        if not staying:
            for f in self.filters:
                f.reset()
            self._runner = None
        return staying

    def restart_law(self) -> None:
        """Out of fault: restart the law from the measured state, bumpless from the last commands
        (on activation), when every last reading is within limits. A fault stays until :meth:`reset`."""
        if all(f.fault is None for f in self.filters):
            self.reset()

    def switch_law(self, law: str, gains=None) -> None:
        """Change law (and per-joint gains) at once, bumpless for every joint."""
        super().switch_law(law, None if gains is None else self._stacked(law, gains))

    def set_gains(self, gains, t: float, ramp_time: float) -> None:
        """Move every joint to its new gains (sequence, joint order) over ``ramp_time`` s from ``t``."""
        super().set_gains(self._stacked(self.law_name, gains), t, ramp_time)

    def set_limits(self, limits) -> None:
        """New per-joint safety limits from the next tick (a lowered torque limit applies at once)."""
        for f, lim, b, k in zip(self.filters, limits, self.model.motor_inertia, self.model.spring_stiffness):
            f.limits, f.accel_bound = lim, motor_accel_bound(lim, b, k)
        self._clip_limits()


def stack_gains(gains) -> Gains:
    """Per-joint Gains as one Gains of arrays (joint order)."""
    return Gains(**{f.name: np.array([getattr(g, f.name) for g in gains], dtype=float) for f in fields(Gains)})


def chain_nominal(setup) -> ChainNominal:
    """The controller's model of the whole robot of a :class:`config.ControllerSetup`: its links
    (the nominal URDF, or the built-in joints) with each joint's motor inertia and spring."""
    return ChainNominal(setup.links, np.array([j.model.motor_inertia for j in setup.joints], dtype=float),
                        np.array([j.model.spring_stiffness for j in setup.joints], dtype=float))


def robot(setup) -> RobotController:
    """One RobotController for every joint of a :class:`config.ControllerSetup`."""
    return RobotController(setup.law, chain_nominal(setup), [j.gains for j in setup.joints],
                           [j.limits for j in setup.joints], setup.joint_names, setup.safe_mode,
                           setup.spring_torque_source == "effort", 1.0 / setup.control_rate)


def build(setup) -> JointBank | RobotController:
    """The controller of a :class:`config.ControllerSetup` behind the robot-wide interface: a
    RobotController for a URDF robot (``setup.urdf_source`` set), else the built-in joints' JointBank."""
    return joint_bank(setup) if setup.urdf_source is None else robot(setup)
