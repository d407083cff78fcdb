"""The envelope: every limit holds after clamping and the curvature omega / v is exactly what was asked."""

from __future__ import annotations

import math
from dataclasses import replace

import pytest
from hypothesis import given
from hypothesis import strategies as st

from shaping.envelope import Bound, Envelope
from tests.shaping.conftest import CART_GEOMETRY, CART_LIMITS

ENVELOPE = Envelope(CART_GEOMETRY, CART_LIMITS)
speeds = st.floats(min_value=-5.0, max_value=5.0, allow_nan=False)
turn_rates = st.floats(min_value=-10.0, max_value=10.0, allow_nan=False)


def inside(v: float, omega: float, slack: float = 1e-9) -> bool:
    limits = CART_LIMITS
    left, right = CART_GEOMETRY.to_wheels(v, omega)
    return (
        v <= limits.speed_mps * (1 + slack)
        and -v <= limits.reverse_speed_mps * (1 + slack)
        and abs(omega) <= limits.turn_rate_radps * (1 + slack)
        and max(abs(left), abs(right)) <= limits.wheel_rate_radps * (1 + slack)
        and abs(v * omega) <= limits.sideways_accel_mps2 * (1 + slack)
    )


@given(speeds, turn_rates)
def test_clamped_request_is_inside_and_keeps_its_curvature(v: float, omega: float) -> None:
    clamped = ENVELOPE.clamp(v, omega)
    assert inside(clamped.v_mps, clamped.omega_radps)
    assert 0.0 < clamped.scale <= 1.0
    # one common factor: the direction in the (v, omega) plane, hence the curvature omega / v, is unchanged
    assert clamped.v_mps == pytest.approx(v * clamped.scale, abs=1e-15)
    assert clamped.omega_radps == pytest.approx(omega * clamped.scale, abs=1e-15)
    if v != 0.0 and clamped.v_mps != 0.0:
        assert clamped.omega_radps / clamped.v_mps == pytest.approx(omega / v, rel=1e-12)


@given(speeds, turn_rates)
def test_requests_inside_pass_unchanged_and_outside_land_on_the_boundary(v: float, omega: float) -> None:
    clamped = ENVELOPE.clamp(v, omega)
    if inside(v, omega, slack=0.0):
        assert (clamped.v_mps, clamped.omega_radps, clamped.bound) == (v, omega, None)
    else:
        assert clamped.bound is not None
        # on the boundary (limits written out in `inside`): in, and a hair further along the same ray, out
        assert inside(clamped.v_mps, clamped.omega_radps, slack=1e-12)
        assert not inside(clamped.v_mps * (1 + 1e-9), clamped.omega_radps * (1 + 1e-9), slack=0.0)


@pytest.mark.parametrize(
    ("v", "omega", "bound"),
    [
        (2.0, 0.0, Bound.SPEED),
        (-2.0, 0.0, Bound.REVERSE_SPEED),
        (0.0, 5.0, Bound.TURN_RATE),
        (0.9, 1.9, Bound.WHEEL_RATE),
    ],
)
def test_each_limit_is_named_when_it_binds(v: float, omega: float, bound: Bound) -> None:
    assert ENVELOPE.clamp(v, omega).bound is bound


def test_sideways_acceleration_scales_both_axes_by_the_square_root() -> None:
    # this cart's wheel limit keeps |v * omega| <= 1.38 m/s^2 anyway; a 1.0 m/s^2 sideways limit binds first.
    # Scaling both by s scales v * omega by s^2, so s = sqrt(1.0 / (0.6 * 1.8)) (common practice: a_c = v * omega)
    envelope = Envelope(CART_GEOMETRY, replace(CART_LIMITS, sideways_accel_mps2=1.0))
    clamped = envelope.clamp(0.6, 1.8)
    assert clamped.bound is Bound.SIDEWAYS_ACCEL
    assert clamped.scale == pytest.approx(math.sqrt(1.0 / (0.6 * 1.8)))
    assert clamped.v_mps * clamped.omega_radps == pytest.approx(1.0)


def test_pure_spin_scales_the_turn_rate_alone() -> None:
    clamped = ENVELOPE.clamp(0.0, -7.0)
    assert clamped.v_mps == 0.0
    assert clamped.omega_radps == pytest.approx(-CART_LIMITS.turn_rate_radps)


def test_turn_rate_left_at_full_speed() -> None:
    # wheel rims at 14 rad/s * 0.075 m = 1.05 m/s; at 1.0 m/s the outer wheel has 0.05 m/s left:
    # omega = 2 * 0.05 / 0.40 = 0.25 rad/s (wheel bound); sideways bound 1.5 / 1.0 = 1.5 rad/s (common practice)
    assert ENVELOPE.max_turn_rate_at(1.0) == pytest.approx(0.25)
    assert ENVELOPE.top_speed_mps == pytest.approx(1.0)
    assert ENVELOPE.top_turn_rate_radps == pytest.approx(min(2.0, 2 * 1.05 / 0.40))
    at_half = ENVELOPE.max_turn_rate_at(0.5)
    assert at_half == pytest.approx(min(2.0, 2 * (1.05 - 0.5) / 0.40, 1.5 / 0.5))
    assert inside(0.5, at_half)
    assert not math.isnan(ENVELOPE.max_turn_rate_at(0.0))


@given(turn_rates)
def test_speed_bounds_at_a_turn_rate_lie_on_the_envelope_boundary(omega: float) -> None:
    reverse, forward = ENVELOPE.speed_bounds_at(omega)
    assert 0.0 <= reverse <= CART_LIMITS.reverse_speed_mps and 0.0 <= forward <= CART_LIMITS.speed_mps
    for v in (forward, -reverse):
        assert inside(v, omega) or abs(omega) > ENVELOPE.top_turn_rate_radps
    if abs(omega) <= ENVELOPE.top_turn_rate_radps and forward > 0.0:
        # one step further is outside: the bound is the boundary, not a guess inside it
        assert not inside(forward * 1.001 + 1e-9, omega, slack=0.0)
