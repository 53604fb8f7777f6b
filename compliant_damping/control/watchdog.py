"""Joint-state silence detection for the controller node, on a clock that cannot jump.

No ROS here: the node feeds it the times (s) of a steady (monotonic) clock in real time, or of
sim time in lock step, and asks it on a timer whether the silence has lasted too long.

* :class:`Watchdog` arms on the first new joint state after activation (never before, so an
  activation ahead of the first state cannot latch safe mode by itself) and expires after
  ``timeout`` without a new one. The fault says what came instead: nothing
  (``watchdog``), only repeats of the last answered stamp (``stamp_stuck``), or only
  messages it had to reject (``watchdog``, with the last rejection).
* :class:`ClockStall` covers lock step: when the sim clock stops (the simulated robot died,
  ``/clock`` stopped) sim time stands still, so no sim-time watchdog can fire. It watches, on
  the steady clock, for the sim time not advancing while joint states are expected.
"""
from __future__ import annotations

from compliant_damping.control.safety import Fault, FaultCode

__all__ = ["Watchdog", "ClockStall", "stall_timeout"]


def stall_timeout(watchdog_timeout: float) -> float:
    """Steady-clock seconds without sim-time progress that count as a stopped clock (s).

    Generous on purpose (a simulation endangers nothing, and a loaded two-core machine can
    pause a process for a second): max(2 s, 20 watchdog timeouts).
    """
    return max(2.0, 20.0 * watchdog_timeout)


class Watchdog:
    """Expires ``timeout`` s after the last new joint state; armed by the first one."""

    def __init__(self, timeout: float):
        self.timeout = timeout
        self.last_new: float | None = None    # time of the last new joint state (s); None: not armed
        self._repeats = 0                     # repeated stamps since then
        self.last_rejection = None            # last rejection since then (joint_state_codec.Rejection)

    @property
    def armed(self) -> bool:
        return self.last_new is not None

    def disarm(self) -> None:
        """Stop watching (inactive node); the next new joint state arms it again."""
        self.last_new, self._repeats, self.last_rejection = None, 0, None

    def fresh(self, t: float) -> None:
        """A new joint state was answered at ``t``."""
        self.last_new, self._repeats, self.last_rejection = t, 0, None

    def repeated(self) -> None:
        """A joint state repeating the last answered stamp arrived."""
        self._repeats += 1

    def rejected(self, rejection) -> None:
        """A joint state was rejected (malformed, older, ahead of the clock)."""
        self.last_rejection = rejection

    def expired(self, t: float) -> Fault | None:
        """The fault at ``t`` if armed and silent for longer than ``timeout``, else None."""
        if self.last_new is None:
            return None
        if t < self.last_new:  # only sim time can go back (the steady clock cannot)
            return Fault(FaultCode.WATCHDOG, f"clock went back {self.last_new - t:.3f} s since the last joint state")
        if t - self.last_new <= self.timeout:
            return None
        silence = t - self.last_new
        if self._repeats:
            return Fault(FaultCode.STAMP_STUCK,
                         f"joint-state stamp repeated {self._repeats} times, nothing new for {silence:.3f} s")
        if self.last_rejection is not None:
            return Fault(FaultCode.WATCHDOG,
                         f"no usable joint state for {silence:.3f} s (last rejected: {self.last_rejection.reason})")
        return Fault(FaultCode.WATCHDOG, f"no joint state for {silence:.3f} s")


class ClockStall:
    """Detects a sim clock that stopped: no sim-time progress for ``timeout`` s of steady time."""

    def __init__(self, timeout: float):
        self.timeout = timeout
        self._sim: float | None = None     # sim time at the last progress (s)
        self._since: float | None = None   # steady time of that progress (s)

    def reset(self) -> None:
        self._sim = self._since = None

    def expired(self, sim_now: float, steady_now: float) -> Fault | None:
        """The fault when sim time stood at ``sim_now`` for longer than ``timeout`` of steady time."""
        if self._sim is None or sim_now != self._sim:
            self._sim, self._since = sim_now, steady_now
            return None
        if steady_now - self._since <= self.timeout:
            return None
        return Fault(FaultCode.CLOCK_STOPPED,
                     f"sim time stood still at {sim_now:.3f} s for {steady_now - self._since:.1f} s of steady time")
