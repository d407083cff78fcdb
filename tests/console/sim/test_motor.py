"""The open-loop DC motor of the simulated robot against the same equations integrated by scipy.

Source: the armature-controlled DC motor, J dw/dt = Kt (duty V - Ke w) / R - b w - Tc sign(w) (Franklin, Powell,
Emami-Naeini, Feedback Control of Dynamic Systems, the DC motor example, from memory; Coulomb friction added, common
practice). scipy.integrate.solve_ivp integrates it with the friction smoothed (tanh(w / 1e-4)), which differs from
the exact sign only while the wheel passes through zero.
"""

from __future__ import annotations

import math

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st
from scipy.integrate import solve_ivp

from console.sim.motor import DcMotor

# an invented small gearmotor seen at the wheel (30:1): plausible, made up
MOTOR = DcMotor(resistance_ohm=2.0, torque_constant_nm_per_a=0.6, inertia_kgm2=0.004, viscous_nms=0.002,
                coulomb_nm=0.05, supply_v=12.0)


def reference(motor: DcMotor, duties: list[float], dt: float, start: float = 0.0) -> np.ndarray:
    """Wheel rate at the end of each step, scipy integrating the same equation with the duty held per step."""
    kt, r, j = motor.torque_constant_nm_per_a, motor.resistance_ohm, motor.inertia_kgm2
    rates, rate = [], start
    for duty in duties:
        def wheel(t: float, state: np.ndarray, duty: float = duty) -> list[float]:
            w = state[0]
            return [(kt * (duty * motor.supply_v - kt * w) / r - motor.viscous_nms * w
                     - motor.coulomb_nm * math.tanh(w / 1e-4)) / j]
        solution = solve_ivp(wheel, (0.0, dt), [rate], method="LSODA", rtol=1e-10, atol=1e-12)
        rate = float(solution.y[0, -1])
        rates.append(rate)
    return np.array(rates)


@settings(max_examples=25, deadline=None)
# no subnormal duties: the reference integrator returns nan for a duty of 5e-324 (a duty on the wire has 4 decimals)
@given(st.lists(st.floats(-1.0, 1.0, allow_subnormal=False), min_size=1, max_size=8),
       st.sampled_from([0.001, 0.01, 0.05]))
def test_the_closed_form_follows_the_integrated_equation(duties: list[float], dt: float) -> None:
    ours, rate = [], 0.0
    for duty in duties:
        rate, _ = MOTOR.step(rate, duty, dt)
        ours.append(rate)
    # the smoothed friction differs from the exact one only within 1e-4 rad/s of zero, and while the wheel sticks
    assert np.allclose(ours, reference(MOTOR, duties, dt), atol=2e-3, rtol=1e-4)


def test_steady_rate_and_time_constant_by_hand() -> None:
    # steady state: Kt (d V - Kt w) / R = b w + Tc  ->  w = (Kt d V / R - Tc) / (b + Kt^2 / R)
    duty = 0.5
    steady = (0.6 * duty * 12.0 / 2.0 - 0.05) / (0.002 + 0.36 / 2.0)
    rate, _ = MOTOR.step(0.0, duty, 10.0)
    assert rate == pytest.approx(steady, rel=1e-9)
    # tau = J R / (b R + Kt^2): after one tau from rest, 1 - 1/e of the way
    tau = 0.004 * 2.0 / (0.002 * 2.0 + 0.36)
    rate, _ = MOTOR.step(0.0, duty, tau)
    assert rate == pytest.approx(steady * (1.0 - math.exp(-1.0)), rel=1e-9)


def test_static_friction_holds_the_wheel_below_the_break_away_duty() -> None:
    # the drive torque at rest Kt d V / R must exceed Tc: d > Tc R / (Kt V) = 0.0139
    assert MOTOR.step(0.0, 0.013, 1.0) == (0.0, 0.0)
    assert MOTOR.step(0.0, 0.015, 1.0)[0] > 0.0


def test_braking_to_a_stop_and_staying_there() -> None:
    rate, _ = MOTOR.step(0.0, 0.8, 2.0)
    rate, angle = MOTOR.step(rate, 0.0, 5.0)   # let go: friction stops it and holds it
    assert rate == 0.0 and angle > 0.0


def test_angle_is_the_integral_of_the_rate() -> None:
    # trapezoid over fine steps against the step's own angle
    rate, total, fine = 3.0, 0.0, []
    for _ in range(2000):
        new_rate, angle = MOTOR.step(rate, -0.4, 0.0005)
        fine.append((rate + new_rate) / 2 * 0.0005)
        total += angle
        rate = new_rate
    assert total == pytest.approx(sum(fine), rel=1e-5)
    assert MOTOR.step(3.0, -0.4, 1.0)[1] == pytest.approx(total, rel=1e-9)
