"""One-axis ramps: time-optimal against ruckig, every bound at every instant, exact arrival."""

from __future__ import annotations

import math

import pytest
from hypothesis import assume, given, settings
from hypothesis import strategies as st

from shaping.ramp import AxisLimits, plan_ramp, stretch_ramp
from tests.shaping.oracle import ruckig_velocity

CONTROL_PERIOD_S = 0.01  # the default command rate, 100 Hz

limit_values = st.floats(min_value=0.2, max_value=5.0)
jerk_values = st.floats(min_value=0.5, max_value=40.0)
velocities = st.floats(min_value=-3.0, max_value=3.0)


@st.composite
def limits_and_start(draw: st.DrawFn, positive: bool) -> tuple[AxisLimits, float, float, float]:
    limits = AxisLimits(draw(limit_values), draw(limit_values), draw(jerk_values))
    low = 0.3 if positive else -3.0
    v0, target = draw(st.floats(low, 3.0)), draw(st.floats(low, 3.0))
    # a start inside the bound that applies to it
    a0 = draw(st.floats(-1.0, 1.0)) * (limits.decel if (v0 > 0) else limits.accel)
    return limits, v0, a0, target


def samples(duration: float, count: int = 400) -> list[float]:
    return [duration * k / count for k in range(count + 1)]


@settings(max_examples=300, deadline=None)
@given(limits_and_start(positive=True))
def test_duration_equals_ruckig_minimum_from_arbitrary_states(case: tuple[AxisLimits, float, float, float]) -> None:
    limits, v0, a0, target = case
    trajectory = ruckig_velocity([(v0, a0)], [target], [limits.accel], [-limits.decel], [limits.jerk])
    # ruckig's bounds are per sign of acceleration; ours per |v| growing or shrinking. They agree while v > 0.
    assume(all(trajectory.at_time(t)[1][0] > 0.0 for t in samples(trajectory.duration, 60)))
    ramp = plan_ramp(v0, a0, target, limits)
    assert abs(ramp.duration - trajectory.duration) <= CONTROL_PERIOD_S
    assert ramp.duration == pytest.approx(trajectory.duration, abs=1e-9)
    for t in samples(ramp.duration, 20):
        _, velocity, acceleration = trajectory.at_time(t)
        state = ramp.at(t)
        assert state.v == pytest.approx(velocity[0], abs=1e-7)
        assert state.a == pytest.approx(acceleration[0], abs=1e-6)


@settings(max_examples=300, deadline=None)
@given(limits_and_start(positive=False))
def test_every_bound_holds_and_the_target_is_reached_exactly(case: tuple[AxisLimits, float, float, float]) -> None:
    limits, v0, a0, target = case
    assume(abs(a0) <= min(limits.accel, limits.decel))  # a start that can pass zero speed inside both bounds
    ramp = plan_ramp(v0, a0, target, limits)
    assert ramp.at(0.0).v == pytest.approx(v0) and ramp.at(0.0).a == pytest.approx(a0)
    for t in samples(ramp.duration):
        state = ramp.at(t)
        assert abs(state.a) <= limits.bound(state.v, state.a) * (1 + 1e-9) + 1e-12
        assert abs(state.j) <= limits.jerk * (1 + 1e-12)
    end = ramp.at(ramp.duration)
    assert (end.v, end.a) == (target, 0.0)
    before_end = ramp.at(ramp.duration * (1 - 1e-12))
    assert before_end.v == pytest.approx(target, abs=1e-6) and before_end.a == pytest.approx(0.0, abs=1e-6)


@given(st.floats(0.2, 3.0), st.floats(0.2, 3.0), st.floats(0.2, 3.0))
def test_no_overshoot_from_rest(target: float, accel: float, jerk: float) -> None:
    ramp = plan_ramp(0.0, 0.0, target, AxisLimits(accel, accel, jerk))
    assert all(0.0 <= ramp.at(t).v <= target * (1 + 1e-12) for t in samples(ramp.duration))


def test_textbook_time_and_distance_from_rest() -> None:
    # Jerk-limited start from rest to v with peak acceleration a (reached when v >= a^2/j): the acceleration
    # is a trapezoid, t = v/a + a/j, distance = v t / 2 by symmetry of the S-curve
    # (common practice; e.g. L. Biagiotti and C. Melchiorri, "Trajectory Planning for Automatic Machines and
    # Robots", Springer, 2008, section 3.4, double-S velocity profile; section from memory).
    v, a, j = 1.0, 0.8, 3.0
    ramp = plan_ramp(0.0, 0.0, v, AxisLimits(a, a, j))
    assert ramp.duration == pytest.approx(v / a + a / j)
    assert ramp.travel() == pytest.approx(v * (v / a + a / j) / 2)
    # below a^2/j the peak is never reached: t = 2 sqrt(v/j)
    short = plan_ramp(0.0, 0.0, 0.1, AxisLimits(a, a, j))
    assert short.duration == pytest.approx(2 * math.sqrt(0.1 / j))


def test_crossing_zero_speed_uses_each_side_bound() -> None:
    # braking bound 1.2 while |v| shrinks, then 0.8 once the robot speeds up in reverse
    limits = AxisLimits(accel=0.8, decel=1.2, jerk=3.0)
    ramp = plan_ramp(1.0, 0.0, -0.5, limits)
    peak_brake = min(ramp.at(t).a for t in samples(ramp.duration) if ramp.at(t).v > 0.05)
    peak_reverse = min(ramp.at(t).a for t in samples(ramp.duration) if ramp.at(t).v < -0.01)
    assert peak_brake == pytest.approx(-1.2)
    assert peak_reverse >= -0.8 - 1e-9
    crossing = min(samples(ramp.duration, 4000), key=lambda t: abs(ramp.at(t).v))
    assert abs(ramp.at(crossing).a) <= 0.8 + 1e-3


@settings(max_examples=200, deadline=None)
@given(limits_and_start(positive=False), st.floats(1.0, 4.0))
def test_stretched_ramp_lasts_exactly_as_asked_within_bounds(
    case: tuple[AxisLimits, float, float, float], factor: float
) -> None:
    limits, v0, a0, target = case
    assume(abs(a0) <= min(limits.accel, limits.decel))
    ramp = plan_ramp(v0, a0, target, limits)
    assume(ramp.duration > 1e-3)
    longer = stretch_ramp(ramp, limits, ramp.duration * factor)
    assert longer.duration == pytest.approx(ramp.duration * factor, rel=1e-9)
    for t in samples(longer.duration):
        state = longer.at(t)
        assert abs(state.a) <= limits.bound(state.v, state.a) * (1 + 1e-9) + 1e-12
    assert longer.at(longer.duration * (1 - 1e-12)).v == pytest.approx(target, abs=1e-6)
