"""The speed / turn-rate / wheel-rate / sideways-acceleration envelope, and saturation that keeps curvature.

A request outside the envelope is scaled by ONE common factor, so omega / v (the path curvature) is exactly what
the operator asked for; clipping the axes or the wheels separately would bend the path.
"""

from __future__ import annotations

import enum
import math
from dataclasses import dataclass

from shaping.geometry import Geometry


class Bound(enum.Enum):
    """A limit that can bind; the value is how a person reads it."""

    SPEED = "speed"
    REVERSE_SPEED = "reverse speed"
    TURN_RATE = "turn rate"
    WHEEL_RATE = "wheel rate"
    SIDEWAYS_ACCEL = "sideways accel"
    ACCEL = "accel"
    JERK = "jerk"
    WHEEL_ACCEL = "wheel accel"


@dataclass(frozen=True, slots=True)
class Limits:
    """The robot's limits, SI units; optional profile keys are already resolved to their defaults."""

    speed_mps: float
    reverse_speed_mps: float
    turn_rate_radps: float
    accel_mps2: float
    decel_mps2: float
    jerk_mps3: float
    turn_accel_radps2: float
    turn_jerk_radps3: float
    sideways_accel_mps2: float | None
    wheel_rate_radps: float
    wheel_accel_radps2: float | None
    stop_decel_mps2: float
    stop_jerk_mps3: float


@dataclass(frozen=True, slots=True)
class Clamped:
    """A request after the envelope: `scale` is the common factor applied (1.0 when it passed)."""

    v_mps: float
    omega_radps: float
    scale: float
    bound: Bound | None


@dataclass(frozen=True, slots=True)
class Envelope:
    geometry: Geometry
    limits: Limits

    @property
    def top_speed_mps(self) -> float:
        """Forward speed reachable on a straight line: the speed limit or the wheel-rate limit."""
        return min(self.limits.speed_mps, self.limits.wheel_rate_radps * self.geometry.wheel_radius_m)

    @property
    def top_reverse_speed_mps(self) -> float:
        return min(self.limits.reverse_speed_mps, self.limits.wheel_rate_radps * self.geometry.wheel_radius_m)

    @property
    def top_turn_rate_radps(self) -> float:
        """Turn rate reachable in a spin on the spot."""
        wheel_bound = 2.0 * self.limits.wheel_rate_radps * self.geometry.wheel_radius_m / self.geometry.track_width_m
        return min(self.limits.turn_rate_radps, wheel_bound)

    def max_turn_rate_at(self, v_mps: float) -> float:
        """|omega| still available while driving at speed v (0 when v itself is at the wheel-rate limit)."""
        speed = abs(v_mps)
        rim_speed = self.limits.wheel_rate_radps * self.geometry.wheel_radius_m
        available = min(self.limits.turn_rate_radps, max(0.0, 2.0 * (rim_speed - speed) / self.geometry.track_width_m))
        if self.limits.sideways_accel_mps2 is not None and speed > 0.0:
            available = min(available, self.limits.sideways_accel_mps2 / speed)
        return available

    def speed_bounds_at(self, omega_radps: float) -> tuple[float, float]:
        """(reverse, forward) speeds still available while turning at omega: the outer wheel's rate limit and the
        sideways limit take their share, as max_turn_rate_at does for the turn rate."""
        turn = abs(omega_radps)
        rim_speed = self.limits.wheel_rate_radps * self.geometry.wheel_radius_m
        room = max(0.0, rim_speed - turn * 0.5 * self.geometry.track_width_m)
        if self.limits.sideways_accel_mps2 is not None and turn > 0.0:
            room = min(room, self.limits.sideways_accel_mps2 / turn)
        return min(self.limits.reverse_speed_mps, room), min(self.limits.speed_mps, room)

    def usage(self, v_mps: float, omega_radps: float) -> tuple[float, Bound | None]:
        """How far out (v, omega) is: the common factor it must be divided by to fit, and the limit that says so.

        Every limit is a ratio that scales linearly with (v, omega) together; the sideways one is v * omega, which
        scales with the square, hence its square root.
        """
        limits = self.limits
        worst, bound = 0.0, None
        if v_mps > 0.0:
            worst, bound = v_mps / limits.speed_mps, Bound.SPEED
        elif v_mps < 0.0:
            worst, bound = -v_mps / limits.reverse_speed_mps, Bound.REVERSE_SPEED
        ratio = abs(omega_radps) / limits.turn_rate_radps
        if ratio > worst:
            worst, bound = ratio, Bound.TURN_RATE
        left, right = self.geometry.to_wheels(v_mps, omega_radps)
        ratio = max(abs(left), abs(right)) / limits.wheel_rate_radps
        if ratio > worst:
            worst, bound = ratio, Bound.WHEEL_RATE
        if limits.sideways_accel_mps2 is not None:
            ratio = math.sqrt(abs(v_mps * omega_radps) / limits.sideways_accel_mps2)
            if ratio > worst:
                worst, bound = ratio, Bound.SIDEWAYS_ACCEL
        return worst, bound

    def clamp(self, v_mps: float, omega_radps: float) -> Clamped:
        """Scale (v, omega) by the largest common factor <= 1 that satisfies every limit; name the one that binds."""
        worst, bound = self.usage(v_mps, omega_radps)
        if worst <= 1.0:
            return Clamped(v_mps, omega_radps, 1.0, None)
        scale = 1.0 / worst
        return Clamped(v_mps * scale, omega_radps * scale, scale, bound)
