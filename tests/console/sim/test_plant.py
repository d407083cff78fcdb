"""The simulated plant against outside references: scipy's ODE solver, textbook first-order and kinematic results.

Kinematics: the differential-drive (unicycle) model x' = v cos(th), y' = v sin(th), th' = omega with
v = (r_R w_R + r_L w_L) / 2 and omega = (r_R w_R - r_L w_L) / W (Siegwart, Nourbakhsh and Scaramuzza, "Introduction to
Autonomous Mobile Robots", 2nd ed., MIT Press, 2011, section 3.2, differential-drive forward kinematics; section from
memory). Motors: a first-order lag reaches 1 - 1/e = 63.2 % of a step at one time constant (Ogata, "Modern Control
Engineering", 5th ed., 2010, section 5-2, first-order systems).
"""

from __future__ import annotations

import dataclasses
import math
from collections.abc import Callable

import numpy as np
import pytest
from scipy.integrate import solve_ivp

from console.profile import SimConfig
from console.sim.plant import Plant
from shaping.geometry import Geometry

GEOMETRY = Geometry(wheel_radius_m=0.05, track_width_m=0.30)
BASE = SimConfig(max_wheel_rate_radps=30.0)
DT = 0.001
SEGMENT_S = 0.01   # commands change every 10 ms, as from a 100 Hz control loop


def _run(plant: Plant, seconds: float, command: Callable[[float], tuple[float, float]], dt: float = DT) -> None:
    for k in range(round(seconds / dt)):
        plant.advance(dt, *command(k * dt))


def _held(command: Callable[[float], tuple[float, float]]) -> Callable[[float], tuple[float, float]]:
    """Zero-order hold of a command at SEGMENT_S."""
    return lambda t: command(math.floor(t / SEGMENT_S + 1e-9) * SEGMENT_S)


def _reference(sim: SimConfig, command: Callable[[float], tuple[float, float]], seconds: float) -> np.ndarray:
    """solve_ivp on motor lag (torque-limited) + unicycle, one call per held command segment.

    State [w_L, w_R, x, y, th]; w' = clamp((u - w) / tau, +-accel), u the command one dead time earlier.
    Returns the state at every segment end, shape (segments + 1, 5).
    """
    r_left = GEOMETRY.wheel_radius_m
    r_right = GEOMETRY.wheel_radius_m * sim.wheel_radius_ratio
    track = GEOMETRY.track_width_m * sim.track_width_scale
    tau, accel = sim.motor_time_constant_s, sim.wheel_accel_radps2

    def rhs(_t: float, s: np.ndarray, u_left: float, u_right: float) -> list[float]:
        w_left, w_right, _x, _y, th = s
        v = 0.5 * (r_right * w_right + r_left * w_left)
        omega = (r_right * w_right - r_left * w_left) / track
        return [
            min(max((u_left - w_left) / tau, -accel), accel),
            min(max((u_right - w_right) / tau, -accel), accel),
            v * math.cos(th),
            v * math.sin(th),
            omega,
        ]

    delay = round(sim.motor_dead_time_s / SEGMENT_S)
    state = np.zeros(5)
    states = [state]
    for k in range(round(seconds / SEGMENT_S)):
        u = command((k - delay) * SEGMENT_S) if k >= delay else (0.0, 0.0)
        solution = solve_ivp(rhs, (k * SEGMENT_S, (k + 1) * SEGMENT_S), state, args=u, method="DOP853",
                             rtol=1e-11, atol=1e-12)
        state = solution.y[:, -1]
        states.append(state)
    return np.array(states)


def _figure_eight(t: float) -> tuple[float, float]:
    swing = 3.0 * math.sin(2.0 * math.pi * t / 10.0)
    return 10.0 + swing, 10.0 - swing


def _arc(_t: float) -> tuple[float, float]:
    return 8.0, 12.0


@pytest.mark.parametrize("command", [_arc, _figure_eight], ids=["arc", "figure-eight"])
def test_pose_matches_solve_ivp_on_the_unicycle_model(command: Callable[[float], tuple[float, float]]) -> None:
    # Mismatched radii and track width: the plant must use the ACTUAL geometry (left nominal, right * ratio).
    sim = dataclasses.replace(BASE, wheel_radius_ratio=1.02, track_width_scale=1.05, motor_dead_time_s=0.01)
    plant = Plant(GEOMETRY, sim)
    held = _held(command)
    reference = _reference(sim, command, 10.0)
    per_segment = round(SEGMENT_S / DT)
    for k in range(len(reference) - 1):
        for i in range(per_segment):
            plant.advance(DT, *held((k * per_segment + i) * DT))
        # The same wheel rates on both sides at every segment end ...
        assert plant.wheel_radps == pytest.approx(tuple(reference[k + 1, :2]), abs=1e-8)
    # ... and the same pose after 10 s: well under 1 mm and 1 mrad.
    x, y, heading = plant.pose
    assert math.hypot(x - reference[-1, 2], y - reference[-1, 3]) < 1e-5   # 0.01 mm: well inside the 1 mm asked
    assert heading == pytest.approx(reference[-1, 4], abs=1e-6)
    assert GEOMETRY.wheel_radius_m * plant.wheel_angles_rad[0] > 3.0   # it really went somewhere (> 3 m of path)


def test_pose_does_not_depend_on_the_step_size() -> None:
    poses = []
    for dt in (0.0005, 0.002, 0.005):
        plant = Plant(GEOMETRY, dataclasses.replace(BASE, motor_dead_time_s=0.0))
        _run(plant, 5.0, _held(_figure_eight), dt)
        poses.append(plant.pose)
    for pose in poses[1:]:
        assert pose == pytest.approx(poses[0], abs=1e-5)   # ~5 m of path; only the in-step mean rate differs


def test_steady_arc_has_radius_v_over_omega() -> None:
    sim = dataclasses.replace(BASE, wheel_radius_ratio=0.98, track_width_scale=1.1)
    plant = Plant(GEOMETRY, sim)
    _run(plant, 2.0, _arc)   # spin up
    left, right = plant.wheel_radps
    r_left, r_right = GEOMETRY.wheel_radius_m, GEOMETRY.wheel_radius_m * 0.98
    v = 0.5 * (r_right * right + r_left * left)
    omega = (r_right * right - r_left * left) / (GEOMETRY.track_width_m * 1.1)
    points = []
    for _ in range(200):
        _run(plant, 0.05, _arc)
        points.append(plant.pose[:2])
    xy = np.array(points)
    # Algebraic circle fit x^2 + y^2 + D x + E y + F = 0 (least squares; common practice).
    design = np.column_stack([xy[:, 0], xy[:, 1], np.ones(len(xy))])
    d, e, f = np.linalg.lstsq(design, -(xy**2).sum(axis=1), rcond=None)[0]
    radius = math.sqrt(d * d / 4 + e * e / 4 - f)
    assert radius == pytest.approx(v / omega, rel=1e-9)


def test_first_order_step_reaches_63_percent_at_one_time_constant() -> None:
    tau = 0.08
    sim = dataclasses.replace(BASE, motor_time_constant_s=tau, motor_dead_time_s=0.0, deadband_radps=0.0,
                              wheel_accel_radps2=1e6)
    for dt in (0.001, 0.004):   # exact exp(-dt/tau) update: the same answer whatever the step
        plant = Plant(GEOMETRY, sim)
        _run(plant, tau, lambda _t: (10.0, 10.0), dt)
        assert plant.wheel_radps[0] == pytest.approx(10.0 * (1.0 - math.exp(-1.0)), rel=1e-12)
        assert plant.wheel_radps[0] == pytest.approx(6.32, abs=0.005)   # 63.2 % of the step (Ogata)


def test_dead_time_delays_the_response() -> None:
    tau, dead = 0.05, 0.03
    sim = dataclasses.replace(BASE, motor_time_constant_s=tau, motor_dead_time_s=dead, deadband_radps=0.0,
                              wheel_accel_radps2=1e6)
    plant = Plant(GEOMETRY, sim)
    _run(plant, dead, lambda _t: (5.0, 5.0))
    assert plant.wheel_radps == (0.0, 0.0)
    assert plant.pose == (0.0, 0.0, 0.0)
    _run(plant, tau, lambda _t: (5.0, 5.0))
    assert plant.wheel_radps[0] == pytest.approx(5.0 * (1.0 - math.exp(-1.0)), rel=1e-9)


@pytest.mark.parametrize(("command", "expected"), [(0.19, 0.0), (-0.19, 0.0), (0.21, 0.21), (-0.3, -0.3)])
def test_deadband(command: float, expected: float) -> None:
    plant = Plant(GEOMETRY, dataclasses.replace(BASE, deadband_radps=0.2))
    _run(plant, 2.0, lambda _t: (command, command))
    assert plant.wheel_radps[0] == pytest.approx(expected, abs=1e-9)
    if expected == 0.0:
        assert plant.measure().left_ticks == 0


def test_torque_limit_caps_the_acceleration_then_the_lag_takes_over() -> None:
    tau, accel, step = 0.08, 60.0, 20.0
    sim = dataclasses.replace(BASE, motor_time_constant_s=tau, motor_dead_time_s=0.0, deadband_radps=0.0,
                              wheel_accel_radps2=accel)
    plant = Plant(GEOMETRY, sim)
    rates = [0.0]
    for _ in range(600):
        plant.advance(DT, step, step)
        rates.append(plant.wheel_radps[0])
    increments = np.diff(rates)
    assert increments.max() == pytest.approx(accel * DT, rel=1e-9)   # the torque limit binds at the start
    assert rates[100] == pytest.approx(accel * 0.1, rel=1e-9)          # 6 rad/s after 0.1 s: a straight ramp
    # The whole response against solve_ivp on w' = clamp((u - w) / tau, +-accel).
    reference = solve_ivp(lambda _t, w: [min(max((step - w[0]) / tau, -accel), accel)], (0.0, 0.6), [0.0],
                          t_eval=np.arange(601) * DT, rtol=1e-10, atol=1e-10, method="DOP853")
    assert np.max(np.abs(np.array(rates) - reference.y[0])) < 1e-6


def test_rate_saturation() -> None:
    plant = Plant(GEOMETRY, dataclasses.replace(BASE, max_wheel_rate_radps=25.0))
    _run(plant, 3.0, lambda _t: (100.0, -100.0))
    assert plant.wheel_radps == pytest.approx((25.0, -25.0), abs=1e-9)


def test_encoder_counts_are_whole_ticks_of_the_wheel_angle() -> None:
    ticks_per_rev = 500
    plant = Plant(GEOMETRY, dataclasses.replace(BASE, encoder_ticks_per_rev=ticks_per_rev))
    tick_rad = 2.0 * math.pi / ticks_per_rev
    for _ in range(50):
        _run(plant, 0.037, lambda _t: (7.3, -4.1))
        state = plant.measure()
        for ticks, angle in zip((state.left_ticks, state.right_ticks), plant.wheel_angles_rad, strict=True):
            assert isinstance(ticks, int)
            assert 0.0 <= angle - ticks * tick_rad < tick_rad
    assert state.left_ticks > 0 > state.right_ticks


@pytest.mark.parametrize(
    ("fault", "moving_wheel", "wheel_rate", "measured_channel", "measured_rate"),
    [
        ({}, 0, 5.0, 0, 5.0),
        ({"swap_motors": True}, 1, 5.0, 1, 5.0),
        ({"invert_left_motor": True}, 0, -5.0, 0, -5.0),
        ({"invert_left_encoder": True}, 0, 5.0, 0, -5.0),
        ({"dead_left": True}, None, 0.0, None, 0.0),
        ({"unit_scale": 1.5}, 0, 7.5, 0, 7.5),
        ({"swap_motors": True, "invert_right_motor": True}, 1, -5.0, 1, -5.0),
    ],
    ids=["none", "swap", "invert-motor", "invert-encoder", "dead", "unit-scale", "swap+invert"],
)
def test_wiring_faults(fault: dict[str, object], moving_wheel: int | None, wheel_rate: float,
                       measured_channel: int | None, measured_rate: float) -> None:
    """Only the LEFT channel is commanded; each fault shows where the motion and the measurement end up."""
    plant = Plant(GEOMETRY, dataclasses.replace(BASE, **fault))
    _run(plant, 2.0, lambda _t: (5.0, 0.0))
    wheels = plant.wheel_radps
    state = plant.measure()
    channels = (state.left_radps, state.right_radps)
    ticks = (state.left_ticks, state.right_ticks)
    for side in (0, 1):
        expected_wheel = wheel_rate if side == moving_wheel else 0.0
        expected_measure = measured_rate if side == measured_channel else 0.0
        assert wheels[side] == pytest.approx(expected_wheel, abs=1e-9)
        assert channels[side] == pytest.approx(expected_measure, abs=1e-9)
        assert np.sign(ticks[side]) == np.sign(expected_measure) or (expected_measure == 0.0 and ticks[side] == 0)


def test_measurement_noise_is_seeded_and_has_the_configured_spread() -> None:
    sim = dataclasses.replace(BASE, noise_radps=0.3, seed=7)
    runs = []
    for _ in range(2):
        plant = Plant(GEOMETRY, sim)
        _run(plant, 1.0, lambda _t: (4.0, 4.0))
        runs.append([plant.measure().left_radps - plant.wheel_radps[0] for _ in range(4000)])
    assert runs[0] == runs[1]                                   # same seed, same noise
    assert float(np.std(runs[0])) == pytest.approx(0.3, rel=0.05)   # 4000 samples: std error ~1.1 %
    assert abs(float(np.mean(runs[0]))) < 0.03                  # unbiased (~3 standard errors of the mean)


def test_halt_stops_at_once_and_drops_delayed_commands() -> None:
    plant = Plant(GEOMETRY, dataclasses.replace(BASE, motor_dead_time_s=0.05))
    _run(plant, 1.0, lambda t: (10.0, 10.0) if t < 0.98 else (12.0, 12.0))   # 12 is still in the delay line
    plant.halt()
    assert plant.wheel_radps == (0.0, 0.0)
    _run(plant, 0.2, lambda _t: (0.0, 0.0))
    assert plant.wheel_radps == (0.0, 0.0)


def test_batched_run_is_the_same_physics_as_single_steps() -> None:
    """Plant.run(n, h) (the firmware's fast path) against n calls of advance(h): torque limit, dead time, deadband,
    settling, saturation and a reversal all included."""
    sim = dataclasses.replace(BASE, motor_dead_time_s=0.0083, wheel_radius_ratio=1.03, max_wheel_rate_radps=18.0)
    one, batched = Plant(GEOMETRY, sim), Plant(GEOMETRY, sim)
    schedule = [(0.0, 0.0), (15.0, 12.0), (15.0, 12.0), (0.1, 5.0), (20.0, -20.0), (-6.0, 6.0), (0.0, 0.0)]
    for left, right in schedule:
        for _ in range(60):          # 60 x 10 ms per command
            for _ in range(10):
                one.advance(DT, left, right)
            batched.run(10, DT, left, right)
            assert batched.wheel_radps == pytest.approx(one.wheel_radps, rel=1e-12, abs=1e-12)
    assert batched.pose == pytest.approx(one.pose, rel=1e-12, abs=1e-12)
    assert batched.wheel_angles_rad == pytest.approx(one.wheel_angles_rad, rel=1e-12)
