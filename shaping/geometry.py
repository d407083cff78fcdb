"""Differential-drive kinematics: body rates (v, omega) <-> wheel angular rates (left, right)."""

from __future__ import annotations

from dataclasses import dataclass


@dataclass(frozen=True, slots=True)
class Geometry:
    """Nominal wheel radius and track width (distance between the wheel contact centres).

    omega > 0 turns left (counter-clockwise seen from above); positive wheel rates drive the robot forward.
    """

    wheel_radius_m: float
    track_width_m: float

    def to_wheels(self, v_mps: float, omega_radps: float) -> tuple[float, float]:
        """Wheel angular rates (left, right) in rad/s that produce body speed v and turn rate omega."""
        half_track = 0.5 * self.track_width_m
        return (v_mps - omega_radps * half_track) / self.wheel_radius_m, (
            v_mps + omega_radps * half_track
        ) / self.wheel_radius_m

    def to_body(self, left_radps: float, right_radps: float) -> tuple[float, float]:
        """Body speed (m/s) and turn rate (rad/s) from the two wheel angular rates."""
        r = self.wheel_radius_m
        return 0.5 * r * (left_radps + right_radps), r * (right_radps - left_radps) / self.track_width_m
