"""Differential-drive kinematics against the textbook equations.

Source: R. Siegwart, I. R. Nourbakhsh, D. Scaramuzza, "Introduction to Autonomous Mobile Robots", 2nd ed.,
MIT Press, 2011, section 3.2.1 (differential-drive forward kinematics; section number from memory):
v = r (phi_r + phi_l) / 2, omega = r (phi_r - phi_l) / (2 l), with l the distance from each wheel to the
midpoint between the wheels (half our track width).
"""

from __future__ import annotations

import math

import pytest
from hypothesis import given
from hypothesis import strategies as st

from shaping.geometry import Geometry

rates = st.floats(min_value=-50.0, max_value=50.0, allow_nan=False)


def test_textbook_forward_kinematics_worked_numbers() -> None:
    # r = 0.1 m, l = 0.25 m (track 0.5 m); phi_l = 4 rad/s, phi_r = 6 rad/s
    # textbook: v = 0.1 * (6 + 4) / 2 = 0.5 m/s; omega = 0.1 * (6 - 4) / (2 * 0.25) = 0.4 rad/s
    v, omega = Geometry(0.1, 0.5).to_body(4.0, 6.0)
    assert v == pytest.approx(0.5, abs=1e-12)
    assert omega == pytest.approx(0.4, abs=1e-12)


def test_equal_wheel_rates_drive_straight_and_opposite_rates_spin_in_place() -> None:
    # common practice
    geometry = Geometry(0.075, 0.40)
    v, omega = geometry.to_body(5.0, 5.0)
    assert (v, omega) == (pytest.approx(0.375), 0.0)
    v, omega = geometry.to_body(-5.0, 5.0)
    assert v == 0.0 and omega == pytest.approx(2 * 0.075 * 5.0 / 0.40)


def test_positive_turn_rate_speeds_up_the_right_wheel() -> None:
    # right-handed frame, z up: omega > 0 turns left (counter-clockwise), so the right wheel runs faster
    left, right = Geometry(0.075, 0.40).to_wheels(0.0, 1.0)
    assert right > 0.0 > left


@given(rates, rates)
def test_inverse_kinematics_inverts_the_textbook_equations(left: float, right: float) -> None:
    geometry = Geometry(0.0625, 0.38)
    r, half = geometry.wheel_radius_m, geometry.track_width_m / 2
    v = r * (right + left) / 2
    omega = r * (right - left) / (2 * half)
    back_left, back_right = geometry.to_wheels(v, omega)
    assert math.isclose(back_left, left, rel_tol=1e-9, abs_tol=1e-9)
    assert math.isclose(back_right, right, rel_tol=1e-9, abs_tol=1e-9)
