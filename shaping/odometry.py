"""Odometry (dead reckoning): the pose after moving on an arc at constant speed and turn rate.

Pure geometry shared by the simulated plant (true pose) and the control loop (pose from measured wheel rates).
"""

from __future__ import annotations

import math

_STRAIGHT_HALF_ANGLE_RAD = 1e-6
"""Below this half heading change per step the chord factor sin(h)/h uses its series (straight-line limit)."""


def arc_step(
    x_m: float, y_m: float, heading_rad: float, v_mps: float, omega_radps: float, dt_s: float
) -> tuple[float, float, float]:
    """Pose after moving for dt at constant v and omega: exactly on the arc (a straight line as omega -> 0).

    The chord of the arc has length v*dt*sin(h)/h with h = omega*dt/2 and points along the mean heading
    heading + h; this form has no 1/omega, so it stays exact and finite through omega = 0.
    """
    half = 0.5 * omega_radps * dt_s
    if -_STRAIGHT_HALF_ANGLE_RAD < half < _STRAIGHT_HALF_ANGLE_RAD:
        chord = v_mps * dt_s * (1.0 - half * half / 6.0)
    else:
        chord = v_mps * dt_s * math.sin(half) / half
    mid = heading_rad + half
    return x_m + chord * math.cos(mid), y_m + chord * math.sin(mid), heading_rad + 2.0 * half
