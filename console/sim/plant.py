"""The simulated robot's physics: two motors, two wheels with encoders, one vehicle. Pure numbers, no I/O.

Per wheel, the motor follows its (delayed) command as a first-order lag whose acceleration is capped by the torque
limit:

    d(rate)/dt = clamp((u - rate) / tau, -accel_max, +accel_max),   u = saturate(deadband(command(t - dead_time)))

This ODE is solved in closed form over each step (a straight acceleration segment while the torque limit binds, then
the exact exponential, exp(-dt / tau)), so a result does not depend on the step size except through the instants at
which a new command takes effect. The vehicle moves on an exact arc per step from the wheels' mean rates over that step
(wheel angle travelled / dt): the heading change is then exact whatever the rates did within the step.

Geometry convention: the LEFT wheel has the nominal radius, the RIGHT wheel nominal * wheel_radius_ratio; the actual
track width is nominal * track_width_scale. The wiring faults of the polarity check sit between the firmware's command
channels and the motors, and between the encoders and the firmware's measurement channels.

Scalar math on floats (math module, no numpy per step) keeps one step at a few microseconds.
"""

from __future__ import annotations

import math
from collections import deque
from dataclasses import dataclass
from typing import TYPE_CHECKING

import numpy as np

from console.sim.motor import DcMotor
from shaping.geometry import Geometry
from shaping.odometry import arc_step

if TYPE_CHECKING:
    from console.profile import SimConfig

TWO_PI = 2.0 * math.pi
_TIME_EPS_S = 1e-9
"""Slack when comparing accumulated step times with the instant a delayed command takes effect."""
_SETTLED_RADPS = 1e-9
"""A wheel within this of its target rate is taken as there (the exponential never gets there; real wheels stick)."""


@dataclass(frozen=True, slots=True)
class PlantState:
    """What the firmware can measure, per command channel, plus the true pose.

    left/right are the firmware's encoder CHANNELS (after any wiring fault): measured wheel rate in rad/s (with noise
    when configured) and integer encoder counts. The pose is the true one (x, y in m, heading in rad, CCW positive).
    """

    left_radps: float
    right_radps: float
    left_ticks: int
    right_ticks: int
    x_m: float
    y_m: float
    heading_rad: float


class _DelayLine:
    """The drive's dead time: a command takes effect `dead` seconds after it arrives."""

    __slots__ = ("dead", "rate", "angle", "_queue", "_active", "_last_in")

    def __init__(self, dead_s: float) -> None:
        self.dead = dead_s
        self.rate = 0.0     # actual wheel rate, rad/s
        self.angle = 0.0    # wheel angle travelled, rad
        self._queue: deque[tuple[float, float]] = deque()   # (time it takes effect, command)
        self._active = 0.0
        self._last_in = 0.0

    def halt(self) -> None:
        """Zero at once: the wheel stops and every command still in the delay line is dropped."""
        self.rate = 0.0
        self._queue.clear()
        self._active = 0.0
        self._last_in = 0.0

    def _delayed(self, t: float, command: float) -> float:
        """Take in `command` arriving at t, release what the delay line holds for t; return the command in force."""
        if command != self._last_in:
            self._queue.append((t + self.dead, command))
            self._last_in = command
        queue = self._queue
        while queue and queue[0][0] <= t + _TIME_EPS_S:
            self._active = queue.popleft()[1]
        return self._active


class _Motor(_DelayLine):
    """One motor and wheel with its own speed loop: deadband, saturation, torque-limited first-order lag."""

    __slots__ = ("tau", "deadband", "accel", "max_rate")

    def __init__(self, tau_s: float, dead_s: float, deadband: float, accel: float, max_rate: float) -> None:
        super().__init__(dead_s)
        self.tau = tau_s
        self.deadband = deadband
        self.accel = accel
        self.max_rate = max_rate

    def _target(self, t: float, command: float) -> float:
        """The motor's target rate at t: the delayed command through the deadband and the saturation."""
        u = self._delayed(t, command)
        if -self.deadband < u < self.deadband:
            return 0.0
        if u > self.max_rate:
            return self.max_rate
        return -self.max_rate if u < -self.max_rate else u

    def _evolve(self, u: float, dt: float) -> float:
        """Closed-form step of the torque-limited lag toward u; return the mean wheel rate over dt."""
        rate = self.rate
        error = u - rate
        if error == 0.0:
            self.angle += rate * dt
            return rate
        tau = self.tau
        accel = self.accel
        band = accel * tau               # below this error the lag is slower than the torque limit
        travelled = 0.0
        rest = dt
        if error > band or error < -band:
            signed_accel = accel if error > 0.0 else -accel
            t_linear = (abs(error) - band) / accel
            if t_linear >= dt:
                new_rate = rate + signed_accel * dt
                self.angle += (rate + new_rate) * 0.5 * dt
                self.rate = new_rate
                return (rate + new_rate) * 0.5
            new_rate = rate + signed_accel * t_linear
            travelled = (rate + new_rate) * 0.5 * t_linear
            rate = new_rate
            error = u - rate
            rest = dt - t_linear
        decay = math.exp(-rest / tau) if tau > 0.0 else 0.0
        travelled += u * rest - error * tau * (1.0 - decay)
        error *= decay
        self.rate = u if -_SETTLED_RADPS < error < _SETTLED_RADPS else u - error
        self.angle += travelled
        return travelled / dt

    def run(self, t: float, h: float, n: int, command: float) -> list[float]:
        """n sub-steps of h from time t, `command` arriving at t: the mean wheel rate over each sub-step.

        Between delay-line events the target is constant; where the torque limit does not bind there, the means
        follow a geometric sequence (the same closed form as `_evolve`, without recomputing exp per sub-step).
        """
        means: list[float] = []
        k = 0
        while k < n:
            u = self._target(t + k * h, command)
            queue = self._queue
            end = n if not queue else min(n, max(k + 1, math.ceil((queue[0][0] - _TIME_EPS_S - t) / h)))
            error = u - self.rate
            if error == 0.0 or -self.accel * self.tau <= error <= self.accel * self.tau and self.tau > 0.0:
                decay = math.exp(-h / self.tau) if self.tau > 0.0 else 0.0
                lag = self.tau * (1.0 - decay) / h
                travelled = 0.0
                for _ in range(end - k):
                    mean = u - error * lag
                    means.append(mean)
                    travelled += mean
                    error *= decay
                    if -_SETTLED_RADPS < error < _SETTLED_RADPS:
                        error = 0.0
                self.rate = u - error
                self.angle += travelled * h
            else:
                for _ in range(end - k):
                    means.append(self._evolve(u, h))
            k = end
        return means


class _DrivenWheel(_DelayLine):
    """A DC motor driven by a duty fraction (console.sim.motor): open loop, or under the firmware's PI speed loop.

    Open loop the channel command (wheel rad/s from the firmware's unit) is a duty of `full_duty_radps`; with the PI
    it is the reference rate, and the duty is ff_ks sign(ref) + ff_kv ref + kp e + ki integral(e), e = ref - rate,
    computed every sub-step and held within +-1 (the integral stops while the duty is held: anti-windup).
    """

    __slots__ = ("motor", "per_radps", "pi", "integral")

    def __init__(self, motor: DcMotor, dead_s: float, full_duty_radps: float,
                 pi: tuple[float, float, float, float] | None) -> None:
        super().__init__(dead_s)
        self.motor = motor
        self.per_radps = 1.0 / full_duty_radps if full_duty_radps > 0.0 else 0.0
        self.pi = pi    # (kp, ki, ff_ks, ff_kv) in duty per rad/s, per rad, duty, per rad/s
        self.integral = 0.0

    def halt(self) -> None:
        super().halt()
        self.integral = 0.0

    def run(self, t: float, h: float, n: int, command: float) -> list[float]:
        """n sub-steps of h from time t, `command` arriving at t: the mean wheel rate over each sub-step.

        The drive's dead time delays the duty on its way to the motor, so under the PI it sits inside the loop, where
        a firmware's speed loop meets it (and where the SIMC rules account for it)."""
        means = []
        for k in range(n):
            if self.pi is None:
                duty = command * self.per_radps
            else:
                kp, ki, ff_ks, ff_kv = self.pi
                error = command - self.rate
                feed = (math.copysign(ff_ks, command) if command != 0.0 else 0.0) + ff_kv * command
                duty = feed + kp * error + self.integral
                if -1.0 < duty < 1.0:
                    self.integral += ki * error * h
            duty = self._delayed(t + k * h, max(-1.0, min(1.0, duty)))
            self.rate, travelled = self.motor.step(self.rate, duty, h)
            self.angle += travelled
            means.append(travelled / h)
        return means


class Plant:
    """Both motors and wheels, the encoders and the vehicle pose; `step` advances it by dt with channel commands."""

    def __init__(self, geometry: Geometry, sim: SimConfig, full_duty_radps: float = 0.0) -> None:
        self.sim = sim
        self.left_radius_m = geometry.wheel_radius_m
        self.right_radius_m = geometry.wheel_radius_m * sim.wheel_radius_ratio
        self.track_m = geometry.track_width_m * sim.track_width_scale
        self._left: _Motor | _DrivenWheel
        self._right: _Motor | _DrivenWheel
        if sim.wheel_loop == "closed":
            motor = (sim.motor_time_constant_s, sim.motor_dead_time_s, sim.deadband_radps, sim.wheel_accel_radps2,
                     sim.max_wheel_rate_radps)
            self._left, self._right = _Motor(*motor), _Motor(*motor)
        else:
            dc = DcMotor(sim.motor_resistance_ohm, sim.motor_torque_constant_nm_per_a, sim.wheel_inertia_kgm2,
                         sim.viscous_friction_nms, sim.coulomb_friction_nm, sim.battery_v)
            pi = (sim.pi_kp, sim.pi_ki, sim.ff_ks, sim.ff_kv) if sim.wheel_loop == "pi" else None
            self._left = _DrivenWheel(dc, sim.motor_dead_time_s, full_duty_radps, pi)
            self._right = _DrivenWheel(dc, sim.motor_dead_time_s, full_duty_radps, pi)
        # Wiring between the firmware's command channels and the motors (faults of the polarity check).
        self._swap = sim.swap_motors
        self._left_gain = 0.0 if sim.dead_left else (-1.0 if sim.invert_left_motor else 1.0) * sim.unit_scale
        self._right_gain = 0.0 if sim.dead_right else (-1.0 if sim.invert_right_motor else 1.0) * sim.unit_scale
        self._rng = np.random.default_rng(sim.seed)
        self._ticks_per_rad = sim.encoder_ticks_per_rev / TWO_PI
        self.t_s = 0.0
        self.x_m = 0.0
        self.y_m = 0.0
        self.heading_rad = 0.0

    @property
    def pose(self) -> tuple[float, float, float]:
        """True pose (x_m, y_m, heading_rad); heading is not wrapped (it counts whole turns)."""
        return self.x_m, self.y_m, self.heading_rad

    @property
    def wheel_radps(self) -> tuple[float, float]:
        """True rates of the physical left and right wheels (no noise, no wiring), rad/s."""
        return self._left.rate, self._right.rate

    @property
    def wheel_angles_rad(self) -> tuple[float, float]:
        """True angles travelled by the physical left and right wheels, rad."""
        return self._left.angle, self._right.angle

    def halt(self) -> None:
        """Both wheels to zero at once (drive power removed, idealized as an immediate stop)."""
        self._left.halt()
        self._right.halt()

    def advance(self, dt_s: float, left_cmd_radps: float, right_cmd_radps: float) -> None:
        """Advance by dt with the firmware's channel commands (wheel rad/s); no measurement is made."""
        self.run(1, dt_s, left_cmd_radps, right_cmd_radps)

    def run(self, n: int, h_s: float, left_cmd_radps: float, right_cmd_radps: float) -> None:
        """n sub-steps of h with the same channel commands: the same as n calls of advance(h), in one loop."""
        if self._swap:
            left_cmd_radps, right_cmd_radps = right_cmd_radps, left_cmd_radps
        t = self.t_s
        lefts = self._left.run(t, h_s, n, self._left_gain * left_cmd_radps)
        rights = self._right.run(t, h_s, n, self._right_gain * right_cmd_radps)
        r_left, r_right, track = self.left_radius_m, self.right_radius_m, self.track_m
        x, y, heading = self.x_m, self.y_m, self.heading_rad
        for left_mean, right_mean in zip(lefts, rights):
            left_speed = r_left * left_mean
            right_speed = r_right * right_mean
            x, y, heading = arc_step(x, y, heading, 0.5 * (left_speed + right_speed),
                                     (right_speed - left_speed) / track, h_s)
        self.x_m, self.y_m, self.heading_rad = x, y, heading
        self.t_s = t + n * h_s

    def measure(self) -> PlantState:
        """What the encoders report now, per firmware channel (noise drawn here, once per measurement)."""
        sim = self.sim
        left_sign = -1.0 if sim.invert_left_encoder else 1.0
        right_sign = -1.0 if sim.invert_right_encoder else 1.0
        left_rate = left_sign * self._left.rate
        right_rate = right_sign * self._right.rate
        if sim.noise_radps > 0.0:
            noise_left, noise_right = self._rng.normal(0.0, sim.noise_radps, size=2)
            left_rate += float(noise_left)
            right_rate += float(noise_right)
        per_rad = self._ticks_per_rad
        return PlantState(
            left_radps=left_rate,
            right_radps=right_rate,
            left_ticks=math.floor(left_sign * self._left.angle * per_rad),
            right_ticks=math.floor(right_sign * self._right.angle * per_rad),
            x_m=self.x_m,
            y_m=self.y_m,
            heading_rad=self.heading_rad,
        )

    def step(self, dt_s: float, left_cmd_radps: float, right_cmd_radps: float) -> PlantState:
        """Advance by dt with the channel commands (wheel rad/s), then measure."""
        self.advance(dt_s, left_cmd_radps, right_cmd_radps)
        return self.measure()
