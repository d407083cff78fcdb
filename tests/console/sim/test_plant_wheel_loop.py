"""The simulated robot without a speed loop in its firmware ([sim] wheel_loop = "open"), and with a PI one ("pi").

Sources:
- [DC] the DC motor at steady state: Kt (d V - Kt w) / R = b w + Tc, so w = (Kt d V / R - Tc) / (b + Kt^2 / R); its
  mechanical time constant J R / (b R + Kt^2) (Franklin, Powell, Emami-Naeini, Feedback Control of Dynamic Systems,
  the DC motor example; from memory).
- [SIMC] Skogestad, "Simple analytic rules for model reduction and PID controller tuning", J. Process Control 13
  (2003): with its PI gains the closed loop follows about e^(-theta s) / (tau_c s + 1) (from memory).
"""

from __future__ import annotations

import math
from dataclasses import replace
from pathlib import Path

import numpy as np
import pytest

from console.bench.tuning import simc_pi
from console.cli import main
from console.profile import SimConfig
from console.sim.plant import Plant
from shaping.geometry import Geometry

GEOMETRY = Geometry(wheel_radius_m=0.06, track_width_m=0.3)
R_OHM, KT, J, B, TC, SUPPLY, DEAD_S = 2.0, 0.6, 0.004, 0.002, 0.05, 12.0, 0.008
OPEN = replace(SimConfig(), wheel_loop="open", motor_resistance_ohm=R_OHM, motor_torque_constant_nm_per_a=KT,
               wheel_inertia_kgm2=J, viscous_friction_nms=B, coulomb_friction_nm=TC, battery_v=SUPPLY,
               motor_dead_time_s=DEAD_S)
FULL_DUTY_RADPS = 40.0   # what the profile's unit says a duty of 1.0 means (the console's nominal mapping)
H = 0.001


def steady_rate(duty: float) -> float:
    """[DC]"""
    return (KT * duty * SUPPLY / R_OHM - TC) / (B + KT * KT / R_OHM)


def left_rates(plant: Plant, command_radps: float, seconds: float) -> np.ndarray:
    rates = []
    for _ in range(round(seconds / H)):
        plant.advance(H, command_radps, command_radps)
        rates.append(plant.wheel_radps[0])
    return np.array(rates)


def test_open_loop_a_duty_gives_the_motors_own_steady_rate_after_the_dead_time() -> None:
    plant = Plant(GEOMETRY, OPEN, FULL_DUTY_RADPS)
    rates = left_rates(plant, 0.5 * FULL_DUTY_RADPS, 2.0)      # duty 0.5
    assert rates[-1] == pytest.approx(steady_rate(0.5), rel=1e-6)
    assert np.all(rates[: round(DEAD_S / H) - 1] == 0.0)       # nothing moves before the drive's dead time
    # [DC] one mechanical time constant after the dead time: 1 - 1/e of the way
    tau = J * R_OHM / (B * R_OHM + KT * KT)
    at = round((DEAD_S + tau) / H) - 1
    assert rates[at] == pytest.approx(steady_rate(0.5) * (1 - math.exp(-1)), rel=0.02)


def test_open_loop_a_small_duty_does_not_break_static_friction() -> None:
    plant = Plant(GEOMETRY, OPEN, FULL_DUTY_RADPS)
    # [DC] the drive torque at rest Kt d V / R must pass Tc: below d = Tc R / (Kt V) = 0.0139 nothing turns
    assert left_rates(plant, 0.012 * FULL_DUTY_RADPS, 0.5)[-1] == 0.0


@pytest.mark.parametrize("tau_c", [None, 0.05])
def test_pi_with_simc_gains_follows_a_step_as_designed(tau_c: float | None) -> None:
    # the motor as a first-order-plus-dead-time model in duty -> rad/s: gain and time constant from [DC]; dead time
    # the drive's plus half a sub-step (the zero-order hold of a sampled loop, common practice)
    gain = (KT * SUPPLY / R_OHM) / (B + KT * KT / R_OHM)
    tau = J * R_OHM / (B * R_OHM + KT * KT)
    theta = DEAD_S + H / 2
    gains = simc_pi(gain, tau, theta, tau_c)
    # feed-forward of the static friction and the back-EMF, [DC] rearranged: duty = Tc R / (Kt V) + (b R + Kt^2) /
    # (Kt V) w
    ks, kv = TC * R_OHM / (KT * SUPPLY), (B * R_OHM + KT * KT) / (KT * SUPPLY)
    sim = replace(OPEN, wheel_loop="pi", pi_kp=gains.kc, pi_ki=gains.ki, ff_ks=ks, ff_kv=kv)
    plant = Plant(GEOMETRY, sim)
    reference = 10.0
    rates = left_rates(plant, reference, 1.0)
    assert rates[-1] == pytest.approx(reference, rel=1e-3)
    # with the feed-forward the step is mostly made open loop; the PI has to close what is left. The 63 % point:
    rise = (np.argmax(rates >= reference * (1 - math.exp(-1))) + 1) * H
    assert rise <= 1.3 * (theta + gains.tau_c_s)
    # the PI's action built up during the dead time and the rise adds to a feed-forward that alone would arrive: some
    # overshoot (13 to 20 % here, the dead time inside the loop), which the feed-forward-free loop below does not have
    assert rates.max() <= reference * 1.25


def test_pi_without_feed_forward_rises_in_about_theta_plus_tau_c() -> None:
    gain = (KT * SUPPLY / R_OHM) / (B + KT * KT / R_OHM)
    tau = J * R_OHM / (B * R_OHM + KT * KT)
    theta = DEAD_S + H / 2
    gains = simc_pi(gain, tau, theta, 0.03)
    plant = Plant(GEOMETRY, replace(OPEN, wheel_loop="pi", pi_kp=gains.kc, pi_ki=gains.ki))
    # a step large enough that the static friction is a small part of it, small enough that the duty stays below 1
    rates = left_rates(plant, 8.0, 1.5)
    rise = (np.argmax(rates >= 8.0 * (1 - math.exp(-1))) + 1) * H
    assert rise == pytest.approx(theta + gains.tau_c_s, rel=0.3)
    assert rates[-1] == pytest.approx(8.0, rel=1e-3)
    # tau_I = tau here (tau < 4 (tau_c + theta)): the PI zero cancels the motor's pole and the loop is
    # e^(-theta s) / ((tau_c + theta) s), which overshoots by well under 1 % for tau_c = 3.5 theta
    assert gains.tau_i_s == tau and rates.max() <= 8.0 * 1.01


def test_open_loop_needs_a_duty_unit(tmp_path: Path, capsys: pytest.CaptureFixture[str]) -> None:
    profile = Path(__file__).resolve().parents[3] / "profiles" / "wren.toml"
    text = profile.read_text().replace("[sim]\n", '[sim]\nwheel_loop = "open"\n', 1)
    path = tmp_path / "robot.toml"
    path.write_text(text)
    assert main(["profile", "check", str(path)]) == 2
    err = capsys.readouterr().err
    assert err.count("\n") == 1 and "sim.wheel_loop" in err and 'units.unit = "duty"' in err
