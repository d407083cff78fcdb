"""Tip-over and traction limits against hand-worked cases and against the equilibrium of the support forces solved
numerically (numpy.linalg.solve for the forces, scipy.optimize.brentq for the acceleration where one vanishes).

Sources:
- [R] static stability factor SSF = T / (2 H): a vehicle of track T with its centre of mass at height H starts to
  tip at a lateral acceleration of SSF x g. NHTSA, rollover resistance ratings, Federal Register 65 FR 34998 (2000)
  and 66 FR 3388 (2001); from memory.
- [S] rigid-body statics: forces and moments balance; a support that would have to pull has lifted off (any statics
  textbook, e.g. Meriam and Kraige, Engineering Mechanics: Statics; from memory).
- [F] Coulomb friction: a tyre transmits at most mu times its normal load (common practice).
"""

from __future__ import annotations

import math

import numpy as np
import pytest
from hypothesis import given
from hypothesis import strategies as st
from scipy.optimize import brentq

from shaping.body import Body, tip_and_grip

G = 9.80665  # standard gravity, m/s^2 (CGPM 1901)


def body(**changes: float) -> Body:
    values = dict(mass_kg=20.0, cog_height_m=0.4, cog_ahead_m=0.0, support_ahead_m=0.0, support_behind_m=0.0,
                  drive_load_share=1.0, tyre_friction=0.7)
    values.update(changes)
    return Body(**values)


def test_a_box_on_two_wheels_as_tall_as_half_its_track_tips_at_one_g() -> None:
    # [R] with T = 2 H: SSF = 1, so 1 g
    assert tip_and_grip(body(cog_height_m=0.25), track_width_m=0.5).sideways_tip_mps2 == pytest.approx(G)


def test_a_passenger_car_like_ssf() -> None:
    # [R] a track of 1.55 m and a centre of mass 0.55 m up: SSF = 1.41 (a typical car's figure, from memory)
    assert tip_and_grip(body(cog_height_m=0.55), 1.55).sideways_tip_mps2 / G == pytest.approx(1.55 / 1.1)


def lift_off(mass: float, height: float, supports: list[float], cog: float) -> float:
    """[S] The acceleration (along the line of the supports) at which the first support's normal force reaches zero.

    Two supports at positions x1 < x2 carry the weight; the inertial force -m a acts at the centre of mass (at x =
    cog, height h). Vertical balance N1 + N2 = m g; moments about the centre of mass: N1 (x1 - cog) + N2 (x2 - cog)
    - (friction at the ground, m a, times h) = 0, the ground forces acting at height 0, h below it.
    """
    x1, x2 = supports

    def smallest_normal(a: float) -> float:
        forces = np.linalg.solve([[1.0, 1.0], [x1 - cog, x2 - cog]], [mass * G, mass * a * height])
        return float(forces.min())

    return brentq(smallest_normal, 0.0, 100.0 * G) if smallest_normal(100.0 * G) < 0 else math.inf


@given(st.floats(0.1, 1.0), st.floats(0.05, 1.5), st.floats(0.2, 1.2))
def test_sideways_tip_is_where_the_inner_wheel_lifts(height: float, track: float, mass: float) -> None:
    # the wheels at -W/2 and +W/2, the centre of mass midway; push it sideways
    expected = lift_off(mass, height, [-track / 2, track / 2], 0.0)
    assert tip_and_grip(body(cog_height_m=height, mass_kg=mass), track).sideways_tip_mps2 == pytest.approx(
        expected, rel=1e-6)


@given(st.floats(0.1, 1.0), st.floats(0.05, 0.6), st.floats(-0.04, 0.04), st.floats(0.05, 0.6))
def test_forward_and_backward_tip_are_where_a_support_lifts(height: float, ahead: float, cog: float,
                                                            behind: float) -> None:
    # a caster `ahead` in front of the drive axle, a skid `behind` it; the drive wheels between them carry no moment
    # of their own, so the outermost supports are the caster and the skid
    limits = tip_and_grip(body(cog_height_m=height, cog_ahead_m=cog, support_ahead_m=ahead,
                               support_behind_m=behind), 0.5)
    # braking forward: the inertial force points forward, the rear support lifts first (tipping over the front)
    braking = lift_off(20.0, height, [-behind, ahead], cog)
    assert limits.forward_tip_mps2 == pytest.approx(braking, rel=1e-6)
    # speeding up forward: mirror the body (x -> -x) and push the same way
    speeding = lift_off(20.0, height, [-ahead, behind], -cog)
    assert limits.backward_tip_mps2 == pytest.approx(speeding, rel=1e-6)


def test_two_wheels_without_casters_balance_only_at_the_axle() -> None:
    # a centre of mass ahead of the only support line tips over the front at once: nothing left to brake with
    limits = tip_and_grip(body(cog_ahead_m=0.02), 0.5)
    assert limits.forward_tip_mps2 == 0.0
    assert limits.backward_tip_mps2 == pytest.approx(G * 0.02 / 0.4)


def test_traction_is_friction_times_the_load_on_the_drive_wheels() -> None:
    # [F] 60 % of the weight on the drive wheels, mu = 0.5: 0.3 g
    assert tip_and_grip(body(drive_load_share=0.6, tyre_friction=0.5), 0.5).traction_mps2 == pytest.approx(0.3 * G)
