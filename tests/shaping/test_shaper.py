"""Both axes together: synchronization against ruckig, limits on every sample, curvature, stops, bad input."""

from __future__ import annotations

import math
from dataclasses import replace

import numpy as np
import pytest
from hypothesis import assume, given, settings
from hypothesis import strategies as st
from ruckig import Synchronization

from shaping.envelope import Bound
from shaping.shaper import Mode, Shaped, Shaper, StopKind, real_cubic_roots
from tests.shaping.conftest import CART_GEOMETRY, CART_LIMITS
from tests.shaping.oracle import ruckig_velocity

PERIOD_S = 0.01
# ruckig knows no wheel-acceleration limit: the oracle comparisons use the cart without it
NO_WHEEL_ACCEL = replace(CART_LIMITS, wheel_accel_radps2=None)


def run(shaper: Shaper, v: float, omega: float, seconds: float, dt: float = PERIOD_S) -> list[Shaped]:
    return [shaper.step(dt, v, omega) for _ in range(round(seconds / dt))]


def settle_time(outputs: list[Shaped], dt: float = PERIOD_S) -> float:
    return next(index + 1 for index, out in enumerate(outputs) if out.settled) * dt


@settings(max_examples=150, deadline=None)
@given(st.floats(-0.5, 1.0), st.floats(-2.0, 2.0))
def test_from_rest_both_axes_arrive_together_as_ruckig_phase_synchronization(v: float, omega: float) -> None:
    shaper = Shaper(CART_GEOMETRY, NO_WHEEL_ACCEL)
    outputs = run(shaper, v, omega, 6.0)
    target = (outputs[-1].v_target_mps, outputs[-1].omega_target_radps)
    assume(abs(target[0]) > 1e-3 and abs(target[1]) > 1e-3)
    accel = CART_LIMITS.accel_mps2  # |v| grows all the way from rest
    max_accel = [accel if target[0] >= 0 else CART_LIMITS.decel_mps2, CART_LIMITS.turn_accel_radps2]
    min_accel = [-CART_LIMITS.decel_mps2 if target[0] >= 0 else -CART_LIMITS.accel_mps2, -CART_LIMITS.turn_accel_radps2]
    jerks = [CART_LIMITS.jerk_mps3, CART_LIMITS.turn_jerk_radps3]
    ours = settle_time(outputs)
    phase = ruckig_velocity([(0.0, 0.0), (0.0, 0.0)], list(target), max_accel, min_accel, jerks, Synchronization.Phase)
    # ruckig falls back to time synchronization (curvature NOT kept) when no phase-synchronized profile fits its
    # duration; that is a lower bound for us, and equal to us when it did phase-synchronize.
    assert ours >= phase.duration - 1e-9
    ratio = target[1] / target[0]
    kept = all(
        abs(phase.at_time(t)[1][1] - ratio * phase.at_time(t)[1][0]) <= 1e-9 * abs(target[1])
        for t in [phase.duration * k / 20 for k in range(21)]
    )
    if kept:
        assert ours - phase.duration <= PERIOD_S + 1e-9
    # the common ramp is itself ruckig-optimal under the tightest of both axes' limits scaled to one path variable
    sigma_limit = min(abs(accel / target[0]), CART_LIMITS.turn_accel_radps2 / abs(target[1]))
    sigma_jerk = min(jerks[0] / abs(target[0]), jerks[1] / abs(target[1]))
    path = ruckig_velocity([(0.0, 0.0)], [1.0], [sigma_limit], [-sigma_limit], [sigma_jerk])
    assert -1e-9 <= ours - path.duration <= PERIOD_S + 1e-9
    assert outputs[-1].v_mps == target[0] and outputs[-1].omega_radps == target[1]


@settings(max_examples=150, deadline=None)
@given(st.floats(0.05, 1.0), st.floats(-2.0, 2.0))
def test_an_arc_from_rest_keeps_its_curvature_all_the_way(v: float, omega: float) -> None:
    shaper = Shaper(CART_GEOMETRY, CART_LIMITS)
    outputs = run(shaper, v, omega, 5.0)
    curvature = outputs[-1].omega_target_radps / outputs[-1].v_target_mps
    assert curvature == pytest.approx(omega / v, rel=1e-9)
    for out in outputs:
        assert out.omega_radps == pytest.approx(curvature * out.v_mps, rel=1e-9, abs=1e-12)


@settings(max_examples=100, deadline=None)
@given(st.floats(0.5, 0.9), st.floats(-0.6, 0.6), st.floats(0.4, 0.9), st.floats(-0.6, 0.6), st.floats(0.05, 0.5))
def test_retarget_mid_ramp_arrives_together_as_ruckig_time_synchronization(
    v1: float, w1: float, v2: float, w2: float, after_s: float
) -> None:
    shaper = Shaper(CART_GEOMETRY, NO_WHEEL_ACCEL)
    start = run(shaper, v1, w1, after_s)[-1]
    assume(not start.settled)
    outputs = run(shaper, v2, w2, 6.0)
    trajectory = ruckig_velocity(
        [(start.v_mps, start.a_mps2), (start.omega_radps, start.alpha_radps2)], [v2, w2],
        [CART_LIMITS.accel_mps2, CART_LIMITS.turn_accel_radps2],
        [-CART_LIMITS.decel_mps2, -CART_LIMITS.turn_accel_radps2],
        [CART_LIMITS.jerk_mps3, CART_LIMITS.turn_jerk_radps3], Synchronization.Time,
    )
    assume(all(trajectory.at_time(t)[1][0] > 0 for t in [trajectory.duration * k / 40 for k in range(41)]))
    assert abs(settle_time(outputs) - trajectory.duration) <= PERIOD_S + 1e-9


def test_independent_mode_keeps_each_axis_time_optimal() -> None:
    shaper = Shaper(CART_GEOMETRY, NO_WHEEL_ACCEL, Mode.INDEPENDENT)
    outputs = run(shaper, 0.8, 0.3, 3.0)
    speed_done = next(i for i, out in enumerate(outputs) if out.v_mps == 0.8) + 1
    turn_done = next(i for i, out in enumerate(outputs) if out.omega_radps == 0.3) + 1
    trajectory = ruckig_velocity([(0, 0), (0, 0)], [0.8, 0.3], [0.8, 3.0], [-1.2, -3.0], [3.0, 10.0])
    assert abs(speed_done * PERIOD_S - trajectory.independent_min_durations[0]) <= PERIOD_S + 1e-9
    assert abs(turn_done * PERIOD_S - trajectory.independent_min_durations[1]) <= PERIOD_S + 1e-9


@settings(max_examples=100, deadline=None)
@given(st.floats(-2.0, 2.0), st.floats(-4.0, 4.0), st.sampled_from([math.nan, math.inf, -math.inf]))
def test_non_finite_requests_are_rejected_and_the_previous_target_held(v: float, omega: float, bad: float) -> None:
    shaper = Shaper(CART_GEOMETRY, CART_LIMITS)
    good = run(shaper, v, omega, 0.5)[-1]
    for bad_request in [(bad, omega), (v, bad), (bad, bad)]:
        out = shaper.step(PERIOD_S, *bad_request)
        assert out.rejected
        assert (out.v_req_mps, out.omega_req_radps) == (v, omega)
        assert (out.v_target_mps, out.omega_target_radps) == (good.v_target_mps, good.omega_target_radps)
        assert all(math.isfinite(x) for x in (out.v_mps, out.omega_radps, out.left_radps, out.right_radps))
    assert not shaper.step(PERIOD_S, v, omega).rejected


def test_non_finite_time_step_is_refused() -> None:
    with pytest.raises(ValueError, match="time step"):
        Shaper(CART_GEOMETRY, CART_LIMITS).step(math.nan, 0.0, 0.0)


def test_controlled_and_fast_stops_from_full_speed() -> None:
    # time to stop from v with peak deceleration d and jerk j: v/d + d/j (common practice, as for starting)
    v = CART_LIMITS.speed_mps
    for kind, decel, jerk in [
        (StopKind.CONTROLLED, CART_LIMITS.decel_mps2, CART_LIMITS.jerk_mps3),
        (StopKind.FAST, CART_LIMITS.stop_decel_mps2, CART_LIMITS.stop_jerk_mps3),
    ]:
        shaper = Shaper(CART_GEOMETRY, replace(CART_LIMITS, wheel_accel_radps2=None))
        run(shaper, v, 0.0, 4.0)
        shaper.stop(kind)
        outputs = run(shaper, 1.0, 0.5, 4.0)  # requests are ignored while stopping
        assert all(out.stopping is kind for out in outputs)
        assert outputs[-1].v_mps == 0.0 and outputs[-1].omega_radps == 0.0
        assert abs(settle_time(outputs) - (v / decel + decel / jerk)) <= PERIOD_S + 1e-9
        assert max(abs(out.a_mps2) for out in outputs) == pytest.approx(decel, rel=1e-3)


def test_a_fast_stop_on_an_arc_keeps_the_path() -> None:
    shaper = Shaper(CART_GEOMETRY, CART_LIMITS)
    run(shaper, 0.6, 0.9, 4.0)
    shaper.stop(StopKind.FAST)
    for out in run(shaper, 0.0, 0.0, 2.0):
        assert out.omega_radps == pytest.approx(1.5 * out.v_mps, rel=1e-9, abs=1e-12)


def test_immediate_zero_is_flagged_and_a_reset_starts_every_ramp_from_zero() -> None:
    shaper = Shaper(CART_GEOMETRY, CART_LIMITS)
    run(shaper, 0.8, 0.0, 3.0)
    shaper.stop(StopKind.FAST)
    shaper.stop(StopKind.CONTROLLED)  # a milder stop never softens a harsher one
    assert shaper.stopping is StopKind.FAST
    shaper.stop(StopKind.IMMEDIATE)
    out = shaper.step(PERIOD_S, 0.8, 0.0)
    assert out.immediate_zero and (out.v_mps, out.a_mps2, out.left_radps) == (0.0, 0.0, 0.0)
    shaper.reset()
    first = shaper.step(PERIOD_S, 0.8, 0.0)
    assert first.stopping is None
    # from rest, one period of full jerk: a = j dt, v = j dt^2 / 2 (common practice)
    assert first.v_mps == pytest.approx(CART_LIMITS.jerk_mps3 * PERIOD_S**2 / 2)


def test_the_binding_limit_is_reported() -> None:
    # what binds at that moment: the jerk as a ramp starts, the acceleration in its middle; towards a request the
    # speed limit cut, the acceleration while the ramp uses all of it and the speed limit otherwise, and on it
    shaper = Shaper(CART_GEOMETRY, CART_LIMITS)
    assert shaper.step(PERIOD_S, 0.2, 0.0).bound is Bound.JERK
    assert run(shaper, 0.9, 0.0, 0.6)[-1].bound is Bound.ACCEL
    outputs = run(shaper, 3.0, 0.0, 3.0)
    for out in outputs:
        at_full_accel = abs(out.a_mps2) >= 0.999 * CART_LIMITS.accel_mps2
        assert out.bound is (Bound.ACCEL if at_full_accel else Bound.SPEED)
    assert outputs[-1].settled and outputs[-1].v_mps == CART_LIMITS.speed_mps
    settled = run(shaper, 0.9, 0.0, 3.0)[-1]
    assert settled.bound is None and settled.settled and settled.accel_use == 0.0


coefficient = st.one_of(st.just(0.0), st.floats(-5.0, -1e-3), st.floats(1e-3, 5.0))


@given(st.lists(coefficient, min_size=4, max_size=4), st.booleans())
def test_closed_form_cubic_roots_agree_with_numpy(coefficients: list[float], quadratic: bool) -> None:
    # reference: numpy.roots (eigenvalues of the companion matrix), a general-purpose library
    if quadratic:
        coefficients[0] = 0.0
    assume(max(map(abs, coefficients)) > 1e-3)
    ours = real_cubic_roots(*coefficients)
    reference = [r.real for r in np.roots(coefficients) if abs(r.imag) < 1e-9]
    polynomial = np.poly1d(coefficients)
    for root in reference:
        nearest = min(ours, key=lambda x: abs(x - root))
        # near a double root the root itself is ill-conditioned; the polynomial's value is what must vanish
        assert abs(polynomial(nearest)) <= 1e-8 * max(1.0, *map(abs, coefficients)) or abs(nearest - root) < 1e-6
