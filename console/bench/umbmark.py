"""UMBmark odometry calibration (Borenstein and Feng, 1996).

J. Borenstein and L. Feng, "Measurement and correction of systematic odometry errors in mobile robots", IEEE
Transactions on Robotics and Automation 12(6), 1996. The robot drives a square of side L clockwise and
counter-clockwise; the return-position errors (true position minus where odometry believes the robot is) of each
direction are averaged into centres of gravity, and two systematic errors are separated:

- type A, the track width: every nominal 90 deg turn is off by alpha (alpha > 0: the robot under-turns);
- type B, unequal wheel diameters: every straight leg curves by beta (beta > 0: it curves to the left).

The equations below are the paper's, written from memory (their structure: alpha from the sum, beta from the
difference of the CW and CCW x errors, both over -4L; R = (L/2) / sin(beta/2); E_d = D_R / D_L = (R + b/2) / (R - b/2);
E_b = 90 deg / (90 deg - alpha); corrections c_L = 2 / (E_d + 1), c_R = 2 / (1/E_d + 1) with the mean diameter kept).
Their signs are re-derived here for our frame by small-angle geometry: start at the origin facing +x, y to the left,
CCW square = left turns. With only alpha, the CCW run ends at (-2L alpha, +2L alpha) and the CW run at
(-2L alpha, -2L alpha); with only beta, CCW ends at (+2L beta, -2L beta) and CW at (-2L beta, -2L beta). Hence
alpha = (x_cw + x_ccw) / (-4L) = (y_cw - y_ccw) / (-4L) and beta = (x_cw - x_ccw) / (-4L) = (y_cw + y_ccw) / (-4L).
We average the x and y estimates of each. The tests check all of this independently on the simulated robot.
"""

from __future__ import annotations

import math
from collections.abc import Sequence
from dataclasses import dataclass
from pathlib import Path

import numpy as np

from console.bench.program import Program, parse_program
from console.bench.recording import read_recording
from console.profile import Profile
from shaping.ramp import AxisLimits, plan_ramp
from shaping.shaper import speed_limits, turn_limits

SPEED_SHARE = 0.25        # of the top speed: slow, as the procedure asks, so the wheels do not slip
TURN_SHARE = 0.25         # of the top turn rate
SETTLE_S = 1.5            # hold at rest after each leg and each turn


@dataclass(frozen=True, slots=True)
class UmbmarkResult:
    side_m: float
    track_width_m: float
    cw: tuple[float, float]           # centre of gravity of the CW return errors (x, y), m
    ccw: tuple[float, float]
    alpha_rad: float                  # type A: turn error per nominal 90 deg turn (> 0: under-turn)
    beta_rad: float                   # type B: curvature per straight leg (> 0: curves left)
    radius_m: float                   # radius of the curved legs (inf when beta = 0)
    wheel_diameter_ratio: float       # E_d = D_R / D_L
    track_width_factor: float         # E_b = b_actual / b_nominal
    c_left: float                     # D_L = c_left * nominal (mean diameter kept)
    c_right: float

    @property
    def max_error_m(self) -> float:
        """E_max,syst: the larger distance of the two centres of gravity from the origin (the paper's measure)."""
        return max(math.hypot(*self.cw), math.hypot(*self.ccw))


def umbmark(side_m: float, track_width_m: float, cw: Sequence[tuple[float, float]],
            ccw: Sequence[tuple[float, float]]) -> UmbmarkResult:
    """Corrections from the return-position errors (true - odometry, start frame) of CW and CCW runs."""
    x_cw, y_cw = (float(v) for v in np.mean(np.asarray(cw, dtype=float), axis=0))
    x_ccw, y_ccw = (float(v) for v in np.mean(np.asarray(ccw, dtype=float), axis=0))
    length = side_m
    alpha = 0.5 * ((x_cw + x_ccw) / (-4.0 * length) + (y_cw - y_ccw) / (-4.0 * length))
    beta = 0.5 * ((x_cw - x_ccw) / (-4.0 * length) + (y_cw + y_ccw) / (-4.0 * length))
    half = 0.5 * track_width_m
    if beta == 0.0:
        radius, ratio = math.inf, 1.0
    else:
        radius = (length / 2.0) / math.sin(beta / 2.0)
        ratio = (radius + half) / (radius - half)
    factor = (math.pi / 2.0) / (math.pi / 2.0 - alpha)
    return UmbmarkResult(side_m, track_width_m, (x_cw, y_cw), (x_ccw, y_ccw), alpha, beta, radius, ratio, factor,
                         2.0 / (ratio + 1.0), 2.0 / (1.0 / ratio + 1.0))


def corrected_values(profile: Profile, result: UmbmarkResult) -> dict[tuple[str, str], float]:
    """The profile changes: the track width scaled by E_b; trims so each wheel's surface speed is what was meant.

    Our profile has one wheel radius and a command trim per wheel (WheelUnits.to_motor multiplies the command by it):
    a wheel c times the nominal diameter needs 1/c times the rate, so trim := trim / c.
    The [sim] section describes the simulated robot RELATIVE to the nominal geometry (actual track width = nominal x
    track_width_scale), so its scale is changed too: the simulated robot stays the same physical robot.
    """
    units = profile.units
    track = round(profile.geometry.track_width_m * result.track_width_factor, 6)
    return {
        ("geometry", "track_width_m"): track,
        ("units", "trim_left"): round(units.trim_left / result.c_left, 6),
        ("units", "trim_right"): round(units.trim_right / result.c_right, 6),
        ("sim", "track_width_scale"): round(profile.sim.track_width_scale * profile.geometry.track_width_m / track, 9),
    }


def square_program(profile: Profile, side_m: float, clockwise: bool) -> Program:
    """Four legs of side_m and four 90 deg turns on the spot, through the shaper, timed from the planned ramps."""
    env, limits = profile.envelope, profile.limits
    v = SPEED_SHARE * env.top_speed_mps
    omega = TURN_SHARE * env.top_turn_rate_radps
    leg_s = _hold_time(v, side_m, speed_limits(limits))
    turn_s = _hold_time(omega, math.pi / 2.0, turn_limits(limits))
    sign = -1.0 if clockwise else 1.0
    segments: list[dict[str, object]] = [{"kind": "hold", "name": "wait", "duration_s": 0.5}]
    for leg in range(1, 5):
        segments += [
            {"kind": "step", "name": f"leg {leg}", "to": v, "duration_s": leg_s},
            {"kind": "hold", "name": f"settle {leg}", "duration_s": SETTLE_S},
            {"kind": "step", "name": f"turn {leg}", "axis": "turn", "to": sign * omega, "duration_s": turn_s},
            {"kind": "hold", "name": f"rest {leg}", "axis": "turn", "duration_s": SETTLE_S},
        ]
    name = f"umbmark-{'cw' if clockwise else 'ccw'}"
    data = {"program": {"name": name, "description": f"UMBmark {side_m:g} m square, "
                                                     f"{'clockwise' if clockwise else 'counter-clockwise'}"},
            "segment": segments}
    return parse_program(data, f"built-in program {name!r}", "built-in")


def _hold_time(rate: float, travel: float, axis_limits: AxisLimits) -> float:
    """How long to hold the request `rate` so that the ramp up, the hold and the ramp down cover `travel`."""
    up = plan_ramp(0.0, 0.0, rate, axis_limits)
    down = plan_ramp(rate, 0.0, 0.0, axis_limits)
    cruise = (travel - up.travel() - down.travel()) / rate
    if cruise < 0.0:
        raise ValueError(f"{travel:g} is too short to reach {rate:g} and stop again")
    return up.duration + cruise


def dead_reckon_end(t: np.ndarray, left_radps: np.ndarray, right_radps: np.ndarray, wheel_radius_m: float,
                    track_width_m: float) -> tuple[float, float, float]:
    """End pose of a robot whose wheels turn at these rates, on the NOMINAL geometry (start at the origin, facing +x).

    Fed with the commanded wheel rates it says where the commands alone would put the robot; the return-position
    error is the true end minus that. (The paper drives by odometry, so there that point is the start. Our runs are
    open-loop through the shaper and a command trim corrects the motor, not the odometry, so the commanded end is the
    reference that stays right before and after the correction.)
    Vectorized: per row the heading change r (right - left) / W dt and the distance r (left + right) / 2 dt, each
    step taken along its mid heading (second-order accurate: far below a millimetre on 10 ms rows).
    """
    left = np.nan_to_num(left_radps)
    right = np.nan_to_num(right_radps)
    dt = np.diff(t, prepend=t[0])
    ds = 0.5 * wheel_radius_m * (left + right) * dt
    dh = wheel_radius_m * (right - left) / track_width_m * dt
    heading = np.cumsum(dh)
    mid = heading - 0.5 * dh
    return float(np.sum(ds * np.cos(mid))), float(np.sum(ds * np.sin(mid))), float(heading[-1])


def return_error(recording: Path, profile: Profile, true_end: tuple[float, float] | None = None) -> tuple[float, float]:
    """Return-position error (x, y) of one square run: true end minus commanded end, in the start frame.

    `true_end` is what the operator measured on the floor; without it the simulated robot's true pose in the
    recording is used.
    """
    rec = read_recording(recording)
    d = rec.data
    x_cmd, y_cmd, _ = dead_reckon_end(rec.t, d["left_cmd_radps"], d["right_cmd_radps"],
                                      profile.geometry.wheel_radius_m, profile.geometry.track_width_m)
    if true_end is None:
        if not rec.has_pose:
            raise ValueError("the recording has no true pose (not the simulated robot): type the end position")
        true_end = (float(d["x_m"][-1]), float(d["y_m"][-1]))
    return true_end[0] - x_cmd, true_end[1] - y_cmd
