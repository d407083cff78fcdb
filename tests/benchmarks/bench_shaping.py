"""Shaping cycle cost, beside ruckig planning the same two-axis moves (figures, not pass/fail asserts).

Targets: the full cycle (sanitize, envelope, two synchronized ramps, exact way check, wheel mapping) on the 'replan'
trace: median <= 25 us, p99 <= 100 us. Two traces: 'replan' changes the request every cycle (every cycle plans
anew: the worst case), 'keys' changes it every 0.4 s as keyboard driving does (most cycles only sample the plan).

`retarget_extra_s`: what staying inside the envelope costs in time. Random re-targets part way into a ramp; the
time our output takes to settle at the new target, minus ruckig's time-synchronized duration from the same state
(ruckig knows no envelope, so it may leave it); as a distribution, in periods.
"""

from __future__ import annotations

import math
import random
import statistics
import time
from dataclasses import replace

from ruckig import ControlInterface, InputParameter, Ruckig, Synchronization, Trajectory

from shaping.envelope import Limits
from shaping.geometry import Geometry
from shaping.shaper import Shaper

GEOMETRY = Geometry(wheel_radius_m=0.075, track_width_m=0.40)
LIMITS = Limits(
    speed_mps=1.0, reverse_speed_mps=0.5, turn_rate_radps=2.0, accel_mps2=0.8, decel_mps2=1.2, jerk_mps3=3.0,
    turn_accel_radps2=3.0, turn_jerk_radps3=10.0, sideways_accel_mps2=1.5, wheel_rate_radps=14.0,
    wheel_accel_radps2=30.0, stop_decel_mps2=2.5, stop_jerk_mps3=12.0,
)
PERIOD_S = 0.01
CYCLES = 20_000


def _requests(kind: str) -> list[tuple[float, float]]:
    if kind == "replan":
        return [(0.9 * math.sin(0.7 * k * PERIOD_S), 1.5 * math.cos(1.1 * k * PERIOD_S)) for k in range(CYCLES)]
    presses = [(0.5, 0.0), (0.8, 0.6), (0.8, -0.6), (0.0, 1.5), (-0.3, 0.0), (0.0, 0.0)]
    return [presses[(k // 40) % len(presses)] for k in range(CYCLES)]


def _shaping_cycle_us(requests: list[tuple[float, float]]) -> tuple[list[float], list[tuple]]:
    """Time each cycle; also keep each cycle's start state and envelope target for ruckig to plan the same move."""
    shaper = Shaper(GEOMETRY, LIMITS)
    times, moves = [], []
    state = (0.0, 0.0, 0.0, 0.0)
    clock = time.perf_counter_ns
    for v, omega in requests:
        start = clock()
        out = shaper.step(PERIOD_S, v, omega)
        times.append((clock() - start) / 1000.0)
        moves.append(state + (out.v_target_mps, out.omega_target_radps))
        state = (out.v_mps, out.a_mps2, out.omega_radps, out.alpha_radps2)
    return times, moves


def _ruckig_plan_us(states: list[tuple]) -> list[float]:
    planner, trajectory = Ruckig(2), Trajectory(2)
    inp = InputParameter(2)
    inp.control_interface = ControlInterface.Velocity
    inp.synchronization = Synchronization.Phase
    inp.max_velocity = [10.0, 10.0]
    inp.max_acceleration = [LIMITS.accel_mps2, LIMITS.turn_accel_radps2]
    inp.min_acceleration = [-LIMITS.decel_mps2, -LIMITS.turn_accel_radps2]
    inp.max_jerk = [LIMITS.jerk_mps3, LIMITS.turn_jerk_radps3]
    inp.current_position = [0.0, 0.0]
    inp.target_acceleration = [0.0, 0.0]
    times = []
    clock = time.perf_counter_ns
    for v, a, omega, alpha, v_target, omega_target in states:
        start = clock()
        inp.current_velocity = [v, omega]
        inp.current_acceleration = [a, alpha]
        inp.target_velocity = [v_target, omega_target]
        planner.calculate(inp, trajectory)
        trajectory.at_time(PERIOD_S)
        times.append((clock() - start) / 1000.0)
    return times


def _retarget_extra_periods(count: int = 400, seed: int = 20261202) -> list[float]:
    rng = random.Random(seed)
    limits = replace(LIMITS, wheel_accel_radps2=None)  # ruckig knows no wheel-acceleration limit
    extra = []
    for _ in range(count):
        shaper = Shaper(GEOMETRY, limits)
        first = (rng.uniform(-0.5, 1.0), rng.uniform(-2.0, 2.0))
        for _ in range(rng.randint(5, 60)):
            out = shaper.step(PERIOD_S, *first)
        second = (rng.uniform(-0.5, 1.0), rng.uniform(-2.0, 2.0))
        start = (out.v_mps, out.a_mps2, out.omega_radps, out.alpha_radps2)
        cycles = 0
        while True:
            cycles += 1
            out = shaper.step(PERIOD_S, *second)
            if out.settled:
                break
        inp = InputParameter(2)
        inp.control_interface = ControlInterface.Velocity
        inp.synchronization = Synchronization.Time
        inp.current_position = [0.0, 0.0]
        inp.current_velocity, inp.current_acceleration = [start[0], start[2]], [start[1], start[3]]
        inp.target_velocity = [out.v_target_mps, out.omega_target_radps]
        inp.target_acceleration = [0.0, 0.0]
        inp.max_velocity = [10.0, 10.0]
        inp.max_acceleration = [limits.accel_mps2, limits.turn_accel_radps2]
        inp.min_acceleration = [-limits.decel_mps2, -limits.turn_accel_radps2]
        inp.max_jerk = [limits.jerk_mps3, limits.turn_jerk_radps3]
        trajectory = Trajectory(2)
        Ruckig(2).calculate(inp, trajectory)
        extra.append(cycles - trajectory.duration / PERIOD_S)
    return sorted(extra)


def run() -> dict:
    figures: dict[str, object] = {"target_replan_median_us": 25.0, "target_replan_p99_us": 100.0}
    for kind in ("replan", "keys"):
        ours, states = _shaping_cycle_us(_requests(kind))
        theirs = _ruckig_plan_us(states)
        median, reference = statistics.median(ours), statistics.median(theirs)
        figures[kind] = {
            "cycle_median_us": round(median, 2),
            "cycle_p99_us": round(sorted(ours)[int(0.99 * len(ours))], 2),
            "ruckig_plan_and_sample_median_us": round(reference, 2),
            "ratio_ours_to_ruckig": round(median / reference, 2),
        }
    replan = figures["replan"]
    assert isinstance(replan, dict)
    replan["meets_target"] = replan["cycle_median_us"] <= 25.0 and replan["cycle_p99_us"] <= 100.0
    extra = _retarget_extra_periods()
    figures["retarget_extra_periods"] = {
        "cases": len(extra),
        **{f"p{q}": round(extra[min(len(extra) - 1, int(q / 100 * len(extra)))], 2) for q in (10, 50, 90, 99)},
        "max": round(extra[-1], 2),
        "share_within_one_period": round(sum(x <= 1.0 + 1e-9 for x in extra) / len(extra), 3),
    }
    return figures
