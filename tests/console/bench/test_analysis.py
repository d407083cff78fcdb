"""Response analysis against textbook results and scipy's own linear-system simulation.

First-order system, unit step: c(t) = 1 - exp(-t / T) (Ogata, "Modern Control Engineering", 5th ed., 2010, section on
first-order systems; from memory). Solving c = 0.1, 0.9 gives the 10-90 % rise time T ln 9 (about 2.2 T, the figure
Franklin, Powell and Emami-Naeini, "Feedback Control of Dynamic Systems", give for a first-order system; from
memory); solving |c - 1| = 0.02 gives the 2 % settling time T ln 50 = 3.91 T (Ogata quotes "4 T" for the 2 % band).
Second-order system: maximum overshoot exp(-zeta pi / sqrt(1 - zeta^2)) (Ogata, same book, section on second-order
systems; from memory). The references for fits and ramps are scipy.signal.lsim runs of the continuous system.
"""

from __future__ import annotations

import math

import numpy as np
import pytest
from scipy import signal

from console.bench import analysis


def _first_order(t: np.ndarray, gain: float, tau: float, dead: float, t_step: float, size: float) -> np.ndarray:
    return np.where(t >= t_step + dead, gain * size * (1.0 - np.exp(-(t - t_step - dead) / tau)), 0.0)


@pytest.mark.parametrize("tau", [0.02, 0.08, 0.5])
def test_first_order_rise_and_settling_match_the_textbook(tau: float) -> None:
    t = np.arange(0.0, 1.0 + 12 * tau, tau / 200)
    y = _first_order(t, 1.0, tau, 0.0, 1.0, 2.0)
    m = analysis.step_metrics(t, y, 1.0, 0.0, 2.0)
    assert m.rise_time_s == pytest.approx(tau * math.log(9.0), rel=2e-3)
    assert m.settling_time_s == pytest.approx(tau * math.log(50.0), rel=2e-3)
    assert m.settling_time_s / tau == pytest.approx(3.9, abs=0.02)
    assert m.overshoot_pct == pytest.approx(0.0, abs=0.01)   # the steady state is the tail mean: 1e-4 % off
    assert m.steady_state_error == pytest.approx(0.0, abs=1e-4)


def test_dead_time_and_steady_state_error_of_a_delayed_lag_with_gain() -> None:
    tau, dead, gain = 0.1, 0.05, 0.9
    t = np.arange(0.0, 3.0, 0.0005)
    y = _first_order(t, gain, tau, dead, 0.5, 4.0)
    m = analysis.step_metrics(t, y, 0.5, 0.0, 4.0)
    # leaving the 2 % band: dead + tau ln(1 / 0.98), from the same first-order response
    assert m.dead_time_s == pytest.approx(dead + tau * math.log(1.0 / 0.98), abs=1e-3)
    assert m.steady_state_error == pytest.approx(4.0 * (1.0 - gain), rel=1e-3)
    assert m.settling_time_s == pytest.approx(dead + tau * math.log(50.0), rel=5e-3)


@pytest.mark.parametrize("zeta", [0.2, 0.5, 0.7])
def test_overshoot_of_a_second_order_step_matches_the_textbook(zeta: float) -> None:
    wn = 10.0
    system = signal.lti([wn**2], [1.0, 2 * zeta * wn, wn**2])
    t = np.linspace(0.0, 6.0, 30001)
    _, y = signal.step(system, T=t)
    m = analysis.step_metrics(t, y, 0.0, 0.0, 1.0)
    assert m.overshoot_pct == pytest.approx(100.0 * math.exp(-zeta * math.pi / math.sqrt(1 - zeta**2)), rel=2e-3)


def test_a_step_the_response_never_follows_has_no_timing() -> None:
    t = np.arange(0.0, 2.0, 0.01)
    m = analysis.step_metrics(t, np.zeros_like(t), 0.5, 0.0, 1.0)
    assert m.rise_time_s is None and m.settling_time_s is None
    assert m.steady_state_error == pytest.approx(1.0)


def _lsim_fopdt(t: np.ndarray, u: np.ndarray, gain: float, tau: float, dead: float) -> np.ndarray:
    """Reference: scipy's continuous simulation of gain / (tau s + 1) fed with u delayed by `dead`."""
    delayed = np.interp(t - dead, t, u, left=u[0])
    _, y, _ = signal.lsim(signal.lti([gain], [tau, 1.0]), delayed, t, interp=False)
    return y


@pytest.mark.parametrize(("gain", "tau", "dead"), [(1.0, 0.08, 0.01), (0.9, 0.2, 0.05), (1.1, 0.04, 0.03)])
def test_fopdt_fit_recovers_parameters_with_noise_and_quantization(gain: float, tau: float, dead: float) -> None:
    dt = 0.01
    t = np.arange(0.0, 12.0, dt)
    # raw steps of several sizes, as a wheels-up identification program would command
    u = np.select([t < 1, t < 3, t < 5, t < 7, t < 9], [0.0, 6.0, 2.0, -4.0, 0.0], 3.0)
    fine_t = np.arange(0.0, 12.0, dt / 10)
    fine_u = np.interp(np.floor(fine_t / dt + 1e-9) * dt, t, u)     # the command is held between loop periods
    y = np.interp(t, fine_t, _lsim_fopdt(fine_t, fine_u, gain, tau, dead))
    rng = np.random.default_rng(5)
    y = y + rng.normal(0.0, 0.05, t.size)                               # measurement noise
    y = np.round(y / 0.02) * 0.02                                       # encoder-rate quantization
    fit = analysis.fit_fopdt(t, u, y)
    # tolerances: gain 2 %, tau 10 %, dead time half a sample (the data's own time resolution)
    assert fit.gain == pytest.approx(gain, rel=0.02)
    assert fit.tau_s == pytest.approx(tau, rel=0.10)
    assert fit.dead_time_s == pytest.approx(dead, abs=dt / 2)
    assert fit.r2 > 0.99 and fit.nrmse < 0.02


def test_fopdt_fit_needs_a_moving_command() -> None:
    t = np.arange(0.0, 5.0, 0.01)
    assert analysis.fit_fopdt(t, np.ones_like(t), np.ones_like(t)) is None


def test_savitzky_golay_derivatives_of_a_sine() -> None:
    t = np.arange(0.0, 10.0, 0.01)
    w = 2 * math.pi * 0.5
    y = np.sin(w * t)
    first = analysis.derivative(t, y, 1)
    second = analysis.derivative(t, y, 2)
    inner = slice(50, -50)
    np.testing.assert_allclose(first[inner], w * np.cos(w * t)[inner], atol=0.01 * w)
    np.testing.assert_allclose(second[inner], -w**2 * np.sin(w * t)[inner], atol=0.02 * w**2)


def test_suggested_acceleration_keeps_the_stated_ramp_tracking_error() -> None:
    fit = analysis.FopdtFit(gain=1.0, tau_s=0.07, dead_time_s=0.02, deadband=0.0, r2=1.0, nrmse=0.0, samples=0)
    radius, track, error = 0.06, 0.3, 0.04
    limits = analysis.suggest_limits({"left": fit, "right": fit}, radius, track, error)
    t = np.arange(0.0, 3.0, 0.0005)
    ramp = limits.wheel_accel_radps2 * t
    y = _lsim_fopdt(t, ramp, 1.0, fit.tau_s, fit.dead_time_s)
    lag = (ramp - y)[-1] * radius          # speed error once the transient is over, m/s
    assert lag == pytest.approx(error, rel=0.01)
    assert limits.accel_mps2 == pytest.approx(radius * limits.wheel_accel_radps2)
    assert limits.turn_accel_radps2 == pytest.approx(2 * radius / track * limits.wheel_accel_radps2)
    # the acceleration obeys the same lag: a jerk ramp leaves it trailing by the stated share
    jerk = limits.wheel_jerk_radps3 * t
    accel = np.gradient(_lsim_fopdt(t, 0.5 * limits.wheel_jerk_radps3 * t**2, 1.0, fit.tau_s, fit.dead_time_s), t)
    assert (jerk - accel)[-10] == pytest.approx(analysis.ACCEL_ERROR_SHARE * limits.wheel_accel_radps2, rel=0.01)


# --- quality gates: each synthetic response breaks one assumption of the fit on purpose ----------------------------

def _steps(dt: float = 0.01) -> tuple[np.ndarray, np.ndarray]:
    t = np.arange(0.0, 12.0, dt)
    return t, np.select([t < 1, t < 4, t < 7, t < 9], [0.0, 5.0, 0.0, -3.0], 0.0)


def test_a_healthy_wheel_passes_every_gate() -> None:
    t, u = _steps()
    fit = analysis.fit_fopdt(t, u, _lsim_fopdt(t, u, 1.0, 0.06, 0.02))
    assert analysis.fit_problems(fit) == ()


def test_a_reversed_encoder_fails_the_sign_gate() -> None:
    t, u = _steps()
    fit = analysis.fit_fopdt(t, u, -_lsim_fopdt(t, u, 1.0, 0.06, 0.02))     # measured = -(true wheel rate)
    assert fit.gain == pytest.approx(-1.0, rel=0.02)
    assert [p.split()[0] for p in analysis.fit_problems(fit)] == ["gain"]


def test_a_dead_time_beyond_the_search_range_is_reported_at_its_bound() -> None:
    t, u = _steps()
    fit = analysis.fit_fopdt(t, u, _lsim_fopdt(t, u, 1.0, 0.06, 1.6))       # 1.6 s: past the 1 s bound
    assert "dead time" in fit.at_bound
    assert any(p.startswith("dead time at its search bound") for p in analysis.fit_problems(fit))


def test_a_response_unrelated_to_the_command_fails_the_goodness_of_fit_gate() -> None:
    t, u = _steps()
    noise = np.random.default_rng(3).normal(0.0, 1.0, t.size)               # the wheel does not follow at all
    problems = analysis.fit_problems(analysis.fit_fopdt(t, u, noise))
    assert any(p.startswith("R^2") for p in problems), problems


def test_a_short_pulse_has_too_few_samples_to_fit() -> None:
    t = np.arange(0.0, 5.0, 0.01)
    u = np.where((t >= 1.0) & (t < 1.3), 4.0, 0.0)                           # 30 samples of commanded motion
    fit = analysis.fit_fopdt(t, u, _lsim_fopdt(t, u, 1.0, 0.06, 0.02))
    assert fit.moving_samples == 30
    assert any("too few" in p for p in analysis.fit_problems(fit))


def test_settling_on_a_noisy_step_is_set_by_the_response_not_by_a_late_noise_excursion() -> None:
    # a first-order step of 1 with Gaussian measurement noise (sigma 0.01): the band is 5 sigma = 5 % of the
    # change, so the noise-free response settles into it at T ln(1 / 0.05) = 3.0 T (the first-order step response
    # c(t) = 1 - exp(-t / T), Ogata, Modern Control Engineering, 5th ed., 2010; from memory). With a 2 % band (or 3
    # sigma of the tail) the 20 s window's noise leaves the band again and again: settling would read seconds.
    tau, sigma, dt = 0.1, 0.01, 0.01
    t = np.arange(0.0, 21.0, dt)
    rng = np.random.default_rng(11)
    y = _first_order(t, 1.0, tau, 0.0, 1.0, 1.0) + rng.normal(0.0, sigma, t.size)
    m = analysis.step_metrics(t, y, 1.0, 0.0, 1.0)
    assert m.settling_band_pct == pytest.approx(5.0, rel=0.1)        # 5 sigma, sigma estimated from 1 s at rest
    band = m.settling_band_pct / 100
    # within two samples plus the time the noise (1 sigma) adds where the response crosses the band edge
    slack = 2 * dt + tau * sigma / band
    assert m.settling_time_s == pytest.approx(tau * math.log(1 / band), abs=slack)
