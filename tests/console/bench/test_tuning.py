"""Wheel-loop tuning checked against the physics, integrated by scipy, not against our own formulas.

Sources:
- [SIMC] S. Skogestad, "Simple analytic rules for model reduction and PID controller tuning", J. Process Control
  13 (2003): for k e^(-theta s) / (tau s + 1), Kc = tau / (k (tau_c + theta)), tau_I = min(tau, 4 (tau_c + theta));
  the closed loop then follows about e^(-theta s) / (tau_c s + 1) (from memory).
- [DC] the armature-controlled DC motor with negligible inductance: J dw/dt = Kt i - b w - Tc sign(w),
  i = (V - Ke w) / R (G. Franklin, J. D. Powell, A. Emami-Naeini, Feedback Control of Dynamic Systems, the DC motor
  example; from memory).
- [P] a dead time e^(-theta s) is stood in for by its Pade approximant (scipy.interpolate.pade) for a linear
  simulation (scipy.signal).
"""

from __future__ import annotations

import math
from pathlib import Path

import numpy as np
import pytest
from numpy.polynomial import Polynomial
from scipy import signal
from scipy.integrate import solve_ivp
from scipy.interpolate import pade

from console.bench.program import BoundProgram, builtin
from console.bench.tuning import DutyStep, fit_feedforward, simc_pi, tune_wheel
from console.profile import load_profile

ROOT = Path(__file__).resolve().parents[3]


def test_simc_rules_worked_by_hand() -> None:
    # [SIMC] k = 2 (rad/s per duty... any unit), tau = 0.1 s, theta = 0.01 s, tau_c = theta:
    # Kc = 0.1 / (2 x 0.02) = 2.5; tau_I = min(0.1, 4 x 0.02 = 0.08) = 0.08 s
    gains = simc_pi(2.0, 0.1, 0.01)
    assert (gains.kc, gains.tau_i_s, gains.tau_c_s) == pytest.approx((2.5, 0.08, 0.01))
    # a slower tau_c: Kc = 0.1 / (2 x 0.05) = 1.0, tau_I = min(0.1, 0.2) = 0.1 (the plant's own time constant)
    gains = simc_pi(2.0, 0.1, 0.01, tau_c_s=0.04)
    assert (gains.kc, gains.tau_i_s) == pytest.approx((1.0, 0.1))
    kp, ki_period = gains.per_period(0.01)
    assert (kp, ki_period) == pytest.approx((1.0, 1.0 * 0.01 / 0.1))
    # in motor rpm through a 30:1 gearbox: 30 / (2 pi / 60) rpm per wheel rad/s
    assert gains.in_unit(30 * 60 / (2 * math.pi)).kc == pytest.approx(1.0 / (30 * 60 / (2 * math.pi)))


def test_no_dead_time_needs_a_chosen_tau_c() -> None:
    with pytest.raises(ValueError, match="tau_c"):
        simc_pi(1.0, 0.1, 0.0)
    assert simc_pi(1.0, 0.1, 0.0, tau_c_s=0.02).kc == pytest.approx(5.0)


def closed_loop_step(k: float, tau: float, theta: float, kc: float, tau_i: float, t: np.ndarray) -> np.ndarray:
    """[P] The unit-step response of PI + FOPDT in unity feedback, the dead time as a 6/6 Pade approximant."""
    # e^(-x) in x = theta s (well conditioned), then x -> theta s: the power-n coefficient times theta^n
    delay_num, delay_den = pade([(-1.0) ** n / math.factorial(n) for n in range(13)], 6)
    powers = theta ** np.arange(6, -1, -1)
    plant_num = k * delay_num.coeffs * powers
    plant_den = np.polymul(delay_den.coeffs * powers, [tau, 1.0])
    pi_num, pi_den = kc * np.array([tau_i, 1.0]), np.array([tau_i, 0.0])
    open_num, open_den = np.polymul(pi_num, plant_num), np.polymul(pi_den, plant_den)
    closed_den = np.polyadd(open_den, open_num)
    _, response = signal.step(signal.lti(open_num, closed_den), T=t)
    return np.asarray(response)


@pytest.mark.parametrize(("k", "tau", "theta", "tau_c"), [
    (20.0, 0.08, 0.01, None),      # a small gearmotor's wheel (rad/s per duty), tau_I = tau: no overshoot
    (20.0, 0.08, 0.01, 0.03),      # a calmer loop
    (5.0, 0.5, 0.02, None),        # a slow, heavy wheel: tau_I = 4 (tau_c + theta) < tau
])
def test_simc_gains_give_the_closed_loop_they_promise(k: float, tau: float, theta: float,
                                                      tau_c: float | None) -> None:
    gains = simc_pi(k, tau, theta, tau_c)
    t = np.linspace(0.0, 20 * (gains.tau_c_s + theta) + 5 * tau, 20001)
    y = closed_loop_step(k, tau, theta, gains.kc, gains.tau_i_s, t)
    assert y[-1] == pytest.approx(1.0, abs=1e-3)          # the integral removes the offset
    # [SIMC] about e^(-theta s) / (tau_c s + 1): 63.2 % of the step after theta + tau_c
    rise = t[np.argmax(y >= 1.0 - math.exp(-1.0))]
    assert rise == pytest.approx(theta + gains.tau_c_s, rel=0.3)
    overshoot = y.max() - 1.0
    if gains.tau_i_s == tau:
        # the PI zero cancels the plant's pole: the loop is e^(-theta s) / ((tau_c + theta) s), whose overshoot the
        # exact delay equation gives
        assert overshoot == pytest.approx(integrating_loop_overshoot(theta, gains.tau_c_s + theta), abs=0.005)
        assert overshoot < 0.05
    else:
        # a lag-dominant plant: SIMC trades some setpoint overshoot for disturbance rejection (from memory)
        assert overshoot < 0.3


def integrating_loop_overshoot(theta: float, horizon: float, steps: int = 40) -> float:
    """Overshoot of the unit-step response of e^(-theta s) / (horizon s) in unity feedback, with the delay exact.

    Before the delay the output y is the loop's integrator state z seen theta later: z' = (1 - z(t - theta)) /
    horizon, solved interval by interval (the method of steps for delay equations), each piece a polynomial.
    """
    piece = Polynomial([0.0])          # z on the interval before: zero before the step
    start, peak = 0.0, 0.0
    for _ in range(steps):
        slope = (Polynomial([1.0]) - piece) / horizon
        piece = slope.integ(lbnd=0.0, k=start)
        inside = [x for x in piece.deriv().roots() if abs(x.imag) < 1e-12 and 0.0 < x.real < theta]
        peak = max(peak, *(piece(x.real) for x in inside), piece(theta))
        start = piece(theta)
    return peak - 1.0


def test_feedforward_fit_recovers_a_dc_motor_integrated_by_scipy() -> None:
    # [DC] an invented small gearmotor, seen at the wheel: R 2 ohm, Kt = Ke = 0.6 (after the gearbox), b 0.002,
    # Tc 0.05 N m, J 0.004 kg m^2, supply 12 V
    r_ohm, kt, b, tc, j, supply = 2.0, 0.6, 0.002, 0.05, 0.004, 12.0

    def duty_at(t: float) -> float:          # steps and a slow sweep both ways
        return 0.6 * math.sin(1.3 * t) + 0.25 * math.copysign(1.0, math.sin(0.4 * t))

    def wheel(t: float, state: np.ndarray) -> list[float]:
        w = state[0]
        torque = kt * (duty_at(t) * supply - kt * w) / r_ohm - b * w - tc * math.tanh(w / 0.01)
        return [torque / j]

    t = np.linspace(0.0, 30.0, 30001)
    solution = solve_ivp(wheel, (0.0, 30.0), [0.0], t_eval=t, max_step=1e-3, rtol=1e-8, atol=1e-10)
    w = solution.y[0]
    duty = np.array([duty_at(x) for x in t])
    fit = fit_feedforward(duty, w, np.gradient(w, t), min_rate_radps=0.5)
    # rearranged [DC]: duty = (Tc R / (Kt V)) sign(w) + ((b R + Kt Ke) / (Kt V)) w + (J R / (Kt V)) dw/dt
    assert fit.static_duty == pytest.approx(tc * r_ohm / (kt * supply), rel=0.05)
    assert fit.duty_per_radps == pytest.approx((b * r_ohm + kt * kt) / (kt * supply), rel=0.02)
    assert fit.duty_per_radps2 == pytest.approx(j * r_ohm / (kt * supply), rel=0.05)
    assert fit.r_squared > 0.999


def test_feedforward_needs_moving_samples() -> None:
    with pytest.raises(ValueError, match="moving samples"):
        fit_feedforward([0.1, 0.2], [0.0, 0.0], [0.0, 0.0])


def _identify_rows(ks: float, kv: float, ka: float, drag: float, dead_s: float = 0.008
                   ) -> tuple[np.ndarray, np.ndarray, np.ndarray, list[DutyStep], list[tuple[str, float, float]]]:
    """The left wheel's part of the `identify` program (duty = wheel rad/s / 27) on a motor with quadratic drag,
    kA dw/dt = d(t - dead) - kS sign(w) - kV w - drag w |w|, integrated by scipy (friction smoothed by tanh), sampled
    every 10 ms."""
    profile = load_profile(ROOT / "profiles" / "wren-open.toml")
    bound = BoundProgram(builtin("identify"), profile.envelope)
    segments = [b for b in bound.segments if b.segment.axis.value == "left"]
    end = segments[-1].t_end_s
    t = np.arange(0.0, end, 0.01)
    samples = bound.sample(0.01)
    duty = samples.first[: t.size] / 27.0

    def wheel(time: float, state: np.ndarray) -> list[float]:
        w = state[0]
        held = duty[min(int((time - dead_s) / 0.01), t.size - 1)] if time >= dead_s else 0.0
        return [(held - ks * math.tanh(w / 1e-3) - kv * w - drag * w * abs(w)) / ka]

    rate = solve_ivp(wheel, (0.0, float(t[-1])), [0.0], t_eval=t, max_step=1e-3, rtol=1e-7, atol=1e-9).y[0]
    steps = [DutyStep(b.segment.index, b.segment.name, b.t_start_s, b.t_end_s, b.start / 27.0, b.end / 27.0)
             for b in segments if b.segment.kind.value == "step"]
    ramps = [("forwards" if b.end > 0 else "backwards", b.t_start_s, b.t_end_s) for b in segments
             if b.segment.kind.value == "ramp"]
    return t, duty, rate, steps, ramps


def test_a_motor_that_is_not_first_order_gets_no_gains() -> None:
    # the demo cart's motor ([DC] rearranged, see test_tuning's sources): kS 0.0155, kV 0.0365, kA 0.00116
    t, duty, rate, steps, ramps = _identify_rows(0.0155, 0.0365, 0.00116, 0.0)
    linear = tune_wheel("left", t, duty, rate, steps, ramps, 0.0, 0.01)
    assert not linear.problems and linear.gains is not None
    assert linear.tau_s == pytest.approx(0.00116 / 0.0365, rel=0.1)
    # quadratic drag: a step between moving levels sees the local slope 1 / (kV + 2 drag w), which falls with the
    # amplitude, and a straight line through the curve duty(w) meets w = 0 below zero (a negative kS)
    ks, kv, drag = 0.0155, 0.0365, 0.006
    t, duty, rate, steps, ramps = _identify_rows(ks, kv, 0.00116, drag)
    curved = tune_wheel("left", t, duty, rate, steps, ramps, 0.0, 0.01)

    def steady(d: float) -> float:      # kS + kV w + drag w^2 = d, the positive root
        return (-kv + math.sqrt(kv * kv + 4 * drag * (d - ks))) / (2 * drag)

    levels = [level / 27.0 for level in (5.0, 10.0, 15.0)]      # 25, 50, 75 % of Wren's 20 rad/s, as duties
    gains = [(steady(b) - steady(a)) / (b - a) for a, b in zip(levels, levels[1:])]
    assert gains[0] / gains[1] > 1.25                            # the physics: more than the gate's 25 %
    slopes = sorted((s.fit.gain for s in curved.steps if s.step.linear and s.fit is not None), reverse=True)
    assert slopes[0] == pytest.approx(gains[0], rel=0.1) and slopes[-1] == pytest.approx(gains[1], rel=0.1)
    assert curved.gains is None
    assert any("not linear over this range" in problem for problem in curved.problems)
    assert any("kS" in problem and "< 0" in problem for problem in curved.feedforward_problems)
