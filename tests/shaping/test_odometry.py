"""Dead reckoning: the exact-arc pose step (shaping.odometry)."""

from __future__ import annotations

import math

import pytest

from shaping.odometry import arc_step


def test_arc_step_lands_on_the_circle_and_is_continuous_through_a_straight_line() -> None:
    """Closed form of motion at constant v, omega: a circle of radius v / omega about the instantaneous centre of
    rotation (Siegwart et al., 2011, section 3.2, from memory), a straight line when omega = 0."""
    x0, y0, th0, v, omega, dt = 1.0, -2.0, 0.7, 0.8, 0.5, 1.3
    x, y, th = arc_step(x0, y0, th0, v, omega, dt)
    radius = v / omega
    centre = (x0 - radius * math.sin(th0), y0 + radius * math.cos(th0))
    assert math.hypot(x - centre[0], y - centre[1]) == pytest.approx(radius, rel=1e-12)
    assert (x, y) == pytest.approx((centre[0] + radius * math.sin(th0 + omega * dt),
                                    centre[1] - radius * math.cos(th0 + omega * dt)), rel=1e-12)
    assert th == pytest.approx(th0 + omega * dt, rel=1e-15)
    straight = arc_step(x0, y0, th0, v, 0.0, dt)
    assert straight == pytest.approx((x0 + v * dt * math.cos(th0), y0 + v * dt * math.sin(th0), th0), rel=1e-15)
    assert arc_step(x0, y0, th0, v, 1e-10, dt) == pytest.approx(straight, abs=1e-9)
