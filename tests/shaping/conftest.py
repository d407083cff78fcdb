"""Shared robot numbers for the shaping tests: an invented cart (demo numbers, not a real robot)."""

from __future__ import annotations

import pytest

from shaping.envelope import Limits
from shaping.geometry import Geometry

CART_GEOMETRY = Geometry(wheel_radius_m=0.075, track_width_m=0.40)
CART_LIMITS = Limits(
    speed_mps=1.0,
    reverse_speed_mps=0.5,
    turn_rate_radps=2.0,
    accel_mps2=0.8,
    decel_mps2=1.2,
    jerk_mps3=3.0,
    turn_accel_radps2=3.0,
    turn_jerk_radps3=10.0,
    sideways_accel_mps2=1.5,
    wheel_rate_radps=14.0,
    wheel_accel_radps2=30.0,
    stop_decel_mps2=2.5,
    stop_jerk_mps3=12.0,
)


@pytest.fixture
def cart_geometry() -> Geometry:
    return CART_GEOMETRY


@pytest.fixture
def cart_limits() -> Limits:
    return CART_LIMITS
