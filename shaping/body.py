"""Limits from the robot's body: the accelerations at which it starts to tip, and what the tyres can transmit.

Static figures for a rigid body on level ground (no slope, no bumps, no payload shift, no suspension dynamics).
They are upper bounds for the profile's acceleration limits, never a safety rating: anything that moves the centre of
mass or tilts the ground lowers them.
"""

from __future__ import annotations

from dataclasses import dataclass

STANDARD_GRAVITY_MPS2 = 9.80665  # conventional value (CGPM 1901)


@dataclass(frozen=True, slots=True)
class Body:
    """Mass properties and support points; lengths from the midpoint of the drive axle, forward positive.

    `support_ahead_m` / `support_behind_m`: how far ahead of / behind the axle the casters or skids touch the ground
    (0 when there are none on that side: the drive wheels themselves are then the outermost support).
    """

    mass_kg: float | None  # for the record; the static figures do not depend on it
    cog_height_m: float
    cog_ahead_m: float
    support_ahead_m: float
    support_behind_m: float
    drive_load_share: float
    tyre_friction: float


@dataclass(frozen=True, slots=True)
class TipAndGrip:
    """Accelerations (m/s^2) at which the body starts to tip over each edge of its support, and the traction limit."""

    sideways_tip_mps2: float
    forward_tip_mps2: float  # a deceleration of forward travel (or speeding up in reverse) tips it over the front
    backward_tip_mps2: float  # speeding up forward (or braking in reverse) tips it over the back
    traction_mps2: float  # what the drive tyres transmit before they slip


def tip_and_grip(body: Body, track_width_m: float) -> TipAndGrip:
    """Static tip-over and traction accelerations.

    Tipping: the inertial force m a at the centre of mass, height h, turns the body about the support edge at
    horizontal distance d when m a h > m g d, so a_tip = g d / h (moments about the edge). Sideways the edge is the
    outer wheel's contact line, d = W / 2, which gives the static stability factor W / (2 h) times g. Traction: the
    drive tyres carry share x m g and transmit at most mu times that (Coulomb friction).
    """
    g, h = STANDARD_GRAVITY_MPS2, body.cog_height_m
    front = max(body.support_ahead_m, 0.0) - body.cog_ahead_m
    back = max(body.support_behind_m, 0.0) + body.cog_ahead_m
    return TipAndGrip(
        sideways_tip_mps2=g * (track_width_m / 2.0) / h,
        forward_tip_mps2=max(0.0, g * front / h),
        backward_tip_mps2=max(0.0, g * back / h),
        traction_mps2=body.tyre_friction * g * body.drive_load_share,
    )
