"""Firmware units and polarity.

rpm <-> rad/s: one revolution is 2 pi rad and one minute is 60 s (BIPM, "The International System of Units
(SI Brochure)", 9th ed., 2019, table 4 (radian) and table 8 (minute)), so 1 rpm = 2 pi / 60 rad/s = 0.104719755 rad/s.
"""

from __future__ import annotations

import math

import pytest
from hypothesis import given
from hypothesis import strategies as st

from shaping.units import WheelUnit, WheelUnits, radps_to_rpm, rpm_to_radps


def test_rpm_conversion_matches_the_si_brochure_definitions() -> None:
    assert rpm_to_radps(1.0) == pytest.approx(0.10471975511965977, rel=1e-15)
    assert rpm_to_radps(60.0) == pytest.approx(2 * math.pi)
    assert radps_to_rpm(2 * math.pi) == pytest.approx(60.0)


def test_motor_rpm_includes_the_gearbox() -> None:
    # a wheel at 1 rev/s behind a 20:1 gearbox: motor at 20 rev/s = 1200 rpm (common practice)
    units = WheelUnits(unit=WheelUnit.RPM, gear_ratio=20.0)
    assert units.to_motor(2 * math.pi, 2 * math.pi) == (pytest.approx(1200.0), pytest.approx(1200.0))


def test_ticks_per_second_from_encoder_resolution_and_gearbox() -> None:
    # 1024 ticks per motor revolution, 10:1 gearbox, wheel at 0.5 rev/s -> 5 motor rev/s -> 5120 ticks/s
    units = WheelUnits(unit=WheelUnit.TICKS_PER_S, ticks_per_rev=1024, gear_ratio=10.0)
    left, _ = units.to_motor(math.pi, 0.0)
    assert left == pytest.approx(5120.0)


def test_duty_fraction_of_the_rate_at_full_duty() -> None:
    units = WheelUnits(unit=WheelUnit.DUTY, full_duty_radps=20.0)
    assert units.to_motor(10.0, -20.0) == (pytest.approx(0.5), pytest.approx(-1.0))


def test_polarity_trim_and_swaps() -> None:
    units = WheelUnits(invert_left=True, trim_right=1.05, swap_motors=True)
    left_cmd, right_cmd = units.to_motor(2.0, 3.0)
    assert (left_cmd, right_cmd) == (pytest.approx(3.15), pytest.approx(-2.0))
    # the robot side reads the commands back as the physical wheel rates (trim stays applied)
    assert units.from_motor(left_cmd, right_cmd) == (pytest.approx(2.0), pytest.approx(3.15))


def test_encoder_only_reversal_flips_the_measurement_alone() -> None:
    units = WheelUnits(invert_right_encoder=True, swap_encoders=True)
    assert units.to_motor(1.0, 2.0) == (1.0, 2.0)
    assert units.measured_from_motor(1.0, 2.0) == (2.0, -1.0)


finite = st.floats(min_value=-1e4, max_value=1e4, allow_nan=False)


@given(finite, finite, st.sampled_from(list(WheelUnit)), st.booleans(), st.booleans(), st.booleans())
def test_commands_round_trip_through_every_unit(
    left: float, right: float, unit: WheelUnit, invert_left: bool, invert_right: bool, swap: bool
) -> None:
    units = WheelUnits(unit, ticks_per_rev=2048, gear_ratio=12.5, full_duty_radps=25.0,
                       invert_left=invert_left, invert_right=invert_right, swap_motors=swap)
    back = units.from_motor(*units.to_motor(left, right))
    assert back == (pytest.approx(left, rel=1e-12, abs=1e-9), pytest.approx(right, rel=1e-12, abs=1e-9))
