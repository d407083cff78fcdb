"""Wheel-rate units the motor firmware wants (rad/s, rpm, encoder ticks per second, duty fraction) and polarity."""

from __future__ import annotations

import enum
import math
from dataclasses import dataclass

RADPS_PER_RPM = 2.0 * math.pi / 60.0
"""One revolution is 2*pi rad (SI Brochure, 9th ed., 2019, table 4: the radian); one minute is 60 s."""


class WheelUnit(enum.Enum):
    RADPS = "radps"
    RPM = "rpm"
    TICKS_PER_S = "ticks_per_s"
    DUTY = "duty"


def rpm_to_radps(rpm: float) -> float:
    return rpm * RADPS_PER_RPM


def radps_to_rpm(radps: float) -> float:
    return radps / RADPS_PER_RPM


@dataclass(frozen=True, slots=True)
class WheelUnits:
    """How one wheel rate in rad/s becomes the number the firmware expects, per wheel.

    rpm and ticks/s are on the motor side of the gearbox (gear_ratio motor revolutions per wheel revolution);
    duty is the fraction of full_duty_radps (the wheel rate at duty 1.0). Trim multiplies the command of one wheel
    to correct a known mismatch. Polarity and wiring, each fixable in the profile:
    - invert_left / invert_right: a side mounted mirrored: its command and its measurement both flip;
    - invert_left_encoder / invert_right_encoder: the measurement alone flips (encoder channels A/B reversed);
    - swap_motors: the firmware's left channel drives the right motor; swap_encoders: likewise for measurements.
    """

    unit: WheelUnit = WheelUnit.RADPS
    ticks_per_rev: float = 0.0
    gear_ratio: float = 1.0
    full_duty_radps: float = 0.0
    invert_left: bool = False
    invert_right: bool = False
    trim_left: float = 1.0
    trim_right: float = 1.0
    invert_left_encoder: bool = False
    invert_right_encoder: bool = False
    swap_motors: bool = False
    swap_encoders: bool = False

    @property
    def suffix(self) -> str:
        return self.unit.value

    @property
    def per_radps(self) -> float:
        """Firmware units per wheel rad/s (before trim and polarity)."""
        if self.unit is WheelUnit.RPM:
            return self.gear_ratio / RADPS_PER_RPM
        if self.unit is WheelUnit.TICKS_PER_S:
            return self.gear_ratio * self.ticks_per_rev / (2.0 * math.pi)
        if self.unit is WheelUnit.DUTY:
            return 1.0 / self.full_duty_radps
        return 1.0

    def _signed_scales(self) -> tuple[float, float]:
        scale = self.per_radps
        return scale * (-1.0 if self.invert_left else 1.0), scale * (-1.0 if self.invert_right else 1.0)

    def to_motor(self, left_radps: float, right_radps: float) -> tuple[float, float]:
        """Wheel rates in rad/s -> firmware commands (unit, trim, polarity)."""
        scale_left, scale_right = self._signed_scales()
        left, right = left_radps * scale_left * self.trim_left, right_radps * scale_right * self.trim_right
        return (right, left) if self.swap_motors else (left, right)

    def from_motor(self, left: float, right: float) -> tuple[float, float]:
        """Firmware command values -> wheel rates in rad/s: undoes unit, polarity and channel swap, not trim.

        Trim exists to make a mismatched motor follow; what a motor receives is the physical rate, so the trim is
        not divided out again. (The simulated robot reads its commands with a units object that holds only the unit:
        the polarity and swap keys are the console's corrections, not the robot's.)
        """
        if self.swap_motors:
            left, right = right, left
        scale_left, scale_right = self._signed_scales()
        return left / scale_left, right / scale_right

    def measured_from_motor(self, left: float, right: float) -> tuple[float, float]:
        """Measured firmware values (telemetry) -> wheel rates in rad/s, with the encoder polarity and swap."""
        if self.swap_encoders:
            left, right = right, left
        scale_left, scale_right = self._signed_scales()
        return (
            left / scale_left * (-1.0 if self.invert_left_encoder else 1.0),
            right / scale_right * (-1.0 if self.invert_right_encoder else 1.0),
        )
