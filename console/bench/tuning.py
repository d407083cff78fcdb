"""Wheel speed loop bring-up: a feed-forward model and PI gains from an open-loop identification run.

Pure computation on arrays and fitted numbers (no files, no plotting), so the report and the tests call it alike.

- Feed-forward: duty = kS sign(w) + kV w + kA dw/dt, fitted by least squares (common practice in robot drive
  bring-up: static friction, back-EMF plus viscous friction, inertia).
- PI gains by the SIMC rules for a first-order-plus-dead-time model k e^(-theta s) / (tau s + 1): Kc = tau / (k
  (tau_c + theta)), tau_I = min(tau, 4 (tau_c + theta)), tau_c = theta unless chosen (S. Skogestad, "Simple analytic
  rules for model reduction and PID controller tuning", Journal of Process Control 13, 2003, 291-309).
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from numpy.typing import ArrayLike


@dataclass(frozen=True, slots=True)
class FeedForward:
    """duty = static_duty sign(w) + duty_per_radps w + duty_per_radps2 dw/dt, and how well that fits."""

    static_duty: float
    duty_per_radps: float
    duty_per_radps2: float
    r_squared: float
    samples: int


def fit_feedforward(duty: ArrayLike, rate_radps: ArrayLike, accel_radps2: ArrayLike,
                    min_rate_radps: float = 0.0) -> FeedForward:
    """Least-squares feed-forward terms from samples of one wheel.

    Samples turning slower than `min_rate_radps` are left out: at rest sign(w) says nothing and static friction
    holds an unknown share of the duty.
    """
    rate = np.asarray(rate_radps, dtype=float)
    moving = np.abs(rate) > min_rate_radps
    commanded = np.asarray(duty, dtype=float)[moving]
    rate = rate[moving]
    if len(commanded) < 4:
        raise ValueError(f"{len(commanded)} moving samples; the feed-forward fit needs at least 4")
    design = np.column_stack([np.sign(rate), rate, np.asarray(accel_radps2, dtype=float)[moving]])
    terms, *_ = np.linalg.lstsq(design, commanded, rcond=None)
    residual = commanded - design @ terms
    spread = float(np.sum((commanded - commanded.mean()) ** 2))
    r_squared = 1.0 - float(np.sum(residual**2)) / spread if spread > 0.0 else 0.0
    return FeedForward(float(terms[0]), float(terms[1]), float(terms[2]), r_squared, len(commanded))


@dataclass(frozen=True, slots=True)
class PiGains:
    """A PI controller u = kc (e + (1 / tau_i) integral of e), in duty per (rad/s) of wheel-rate error."""

    kc: float
    tau_i_s: float
    tau_c_s: float

    @property
    def ki(self) -> float:
        """Integral gain of the parallel form, duty per (rad/s) per s."""
        return self.kc / self.tau_i_s

    def per_period(self, period_s: float) -> tuple[float, float]:
        """The discrete parallel form for a loop run every `period_s`: (kp, ki x period), the integral summed once
        per period (rectangular rule): u_k = kp e_k + ki_T sum(e_0 .. e_k)."""
        return self.kc, self.kc * period_s / self.tau_i_s

    def in_unit(self, per_radps: float) -> PiGains:
        """The same controller with the error measured in a firmware unit (`per_radps` units per wheel rad/s)."""
        return PiGains(self.kc / per_radps, self.tau_i_s, self.tau_c_s)


def simc_pi(gain: float, tau_s: float, dead_time_s: float, tau_c_s: float | None = None) -> PiGains:
    """SIMC PI gains for the model gain x e^(-dead_time s) / (tau s + 1) (see the module docstring).

    The default tau_c = dead time is the paper's choice for tight control with good robustness; with no dead time
    it has to be given.
    """
    tau_c = dead_time_s if tau_c_s is None else tau_c_s
    if not (gain != 0.0 and tau_s > 0.0 and dead_time_s >= 0.0 and tau_c > 0.0):
        raise ValueError(f"SIMC needs a non-zero gain, tau > 0 and tau_c + dead time > 0 (gain {gain:g}, tau "
                         f"{tau_s:g} s, dead time {dead_time_s:g} s, tau_c {tau_c:g} s)")
    horizon = tau_c + dead_time_s
    return PiGains(kc=tau_s / (gain * horizon), tau_i_s=min(tau_s, 4.0 * horizon), tau_c_s=tau_c)
