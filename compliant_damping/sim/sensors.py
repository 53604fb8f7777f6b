"""What the simulated joint reports: true state plus noise, encoder quantisation and delay."""
from __future__ import annotations

import math
from collections import deque
from dataclasses import dataclass

import numpy as np

from compliant_damping.control.sample import JointSample
from compliant_damping.fields import param

__all__ = ["SensorParams", "SensorChannel"]


@dataclass(frozen=True)
class SensorParams:
    """Measurement imperfections of one simulated joint."""

    position_noise: float = param("rad", "nonnegative", "std. dev. of white noise on q and theta", 0.0)
    velocity_noise: float = param("rad/s", "nonnegative", "std. dev. of white noise on q' and theta'", 0.0)
    torque_noise: float = param("N m", "nonnegative", "std. dev. of white noise on the spring torque", 0.0)
    encoder_resolution: float = param("rad", "nonnegative", "position quantum of both encoders (0: none)", 0.0)
    delay: float = param("s", "nonnegative", "transport delay of the readings (rounded to whole samples)", 0.0)


class SensorChannel:
    """Turns true states into readings, one call per sample period ``period`` (s)."""

    def __init__(self, params: SensorParams, period: float, rng: np.random.Generator):
        self.params = params
        self.rng = rng
        self._queue: deque = deque(maxlen=int(round(params.delay / period)) + 1)
        # ideal: readings are the true state (no noise, quantisation or delay); fixed with params
        self.ideal = self._queue.maxlen == 1 and not (params.position_noise or params.velocity_noise
                                                       or params.torque_noise or params.encoder_resolution)

    def read(self, q: float, dq: float, theta: float, dtheta: float, tau_s: float) -> JointSample:
        """Reading available now for the true state given (the oldest one still in the delay line)."""
        if self.ideal:  # exact and undelayed: skip the pipeline
            return JointSample(q, dq, theta, dtheta, tau_s)
        p = self.params
        if p.position_noise > 0.0:
            q, theta = q + self.rng.normal(0.0, p.position_noise), theta + self.rng.normal(0.0, p.position_noise)
        if p.velocity_noise > 0.0:
            dq, dtheta = dq + self.rng.normal(0.0, p.velocity_noise), dtheta + self.rng.normal(0.0, p.velocity_noise)
        if p.torque_noise > 0.0:
            tau_s += self.rng.normal(0.0, p.torque_noise)
        if p.encoder_resolution > 0.0:
            r = p.encoder_resolution
            q, theta = r * math.floor(q / r + 0.5), r * math.floor(theta / r + 0.5)
        self._queue.append(JointSample(q, dq, theta, dtheta, tau_s))
        return self._queue[0]
