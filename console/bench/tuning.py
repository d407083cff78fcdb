"""Wheel speed loop bring-up: a feed-forward model and PI gains from an open-loop identification run.

Pure computation on arrays and fitted numbers (no files, no plotting), so the report and the tests call it alike.
`tune_wheel` takes one wheel's rows of an `identify` run (duty commanded, rate measured, the steps and ramps) and
returns its feed-forward, step fits, break-away duties and gains, each behind its quality gates.

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
from scipy import signal

from console.bench.analysis import MIN_FIT_R2, FopdtFit, fit_fopdt, fit_problems
from shaping.units import WheelUnit, WheelUnits


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


# --- from an open-loop identification run (the `identify` program) -----------------------------------------------

FF_WINDOW_S = 0.2
"""Window of the feed-forward regression. Over a window the model holds in its integral form (below), which needs no
derivative of a noisy rate; 0.2 s spans several time constants of a small gearmotor, so the rate change across it is
large against the noise (whose share would bias kA low: errors in the variables)."""
REST_SIGMAS = 5.0           # a wheel is moving once its rate leaves 5 sigma of the noise at rest (as the settling band)
BREAK_HOLD_S = 0.1          # ... and stays out of that band this long (a single noise spike is not a break-away)
BREAK_SMOOTH_S = 0.15       # the break-away reading smooths the rate over this window (as the report's derivatives)
MIN_FF_WINDOWS = 50         # our choice, as the FOPDT fits' 50 moving samples
MIN_FF_R2 = MIN_FIT_R2      # as the FOPDT fits' gate
MAX_MODEL_DISAGREEMENT = 0.25
"""The step fits and the feed-forward fit describe the same motor: gain 1 / kV and time constant kA / kV, the same
gain at every amplitude. When they differ by more than 25 % (our choice) the motor is not first order, or not linear,
over the range (a current limit, backlash, a coarse encoder, heavy drag) and gains from either would be advice from a
model that does not describe it."""


def window_regressors(t: np.ndarray, duty: np.ndarray, rate: np.ndarray, dead_time_s: float,
                      rest_band_radps: float, window_s: float = FF_WINDOW_S,
                      ) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Window means of duty, rate and acceleration for `fit_feedforward`, over every window in which the wheel turns
    one way throughout (|rate| beyond the rest band at every sample).

    The model duty = kS sign(w) + kV w + kA dw/dt, averaged over a window [a, b] of one sign, is exactly
    mean(duty) = kS sign + kV (integral of w) / (b - a) + kA (w(b) - w(a)) / (b - a). The duty is held from one row
    to the next (a zero-order hold) and reaches the motor `dead_time_s` later: its integral is exact; the rate's is
    the trapezoid rule over the rows.
    """
    if t.size < 3:
        return np.empty(0), np.empty(0), np.empty(0)
    held = np.concatenate([[0.0], np.cumsum(duty[:-1] * np.diff(t))])      # integral of the held duty up to t[k]
    integral = np.concatenate([[0.0], np.cumsum(0.5 * (rate[1:] + rate[:-1]) * np.diff(t))])
    span = max(1, int(round(window_s / float(np.median(np.diff(t))))))
    if t.size <= span:
        return np.empty(0), np.empty(0), np.empty(0)
    direction = np.where(np.abs(rate) > rest_band_radps, np.sign(rate), 0.0)
    windows = np.lib.stride_tricks.sliding_window_view(direction, span + 1)
    start = np.flatnonzero((windows.min(axis=1) == windows.max(axis=1)) & (windows[:, 0] != 0.0)
                           & (t[: t.size - span] - dead_time_s >= t[0]))
    end = start + span
    length = t[end] - t[start]
    duty_integral = np.interp(t[end] - dead_time_s, t, held) - np.interp(t[start] - dead_time_s, t, held)
    return (duty_integral / length, (integral[end] - integral[start]) / length,
            (rate[end] - rate[start]) / length)


def feedforward_problems(ff: FeedForward | None, why_none: str = "") -> tuple[str, ...]:
    """The quality gates a feed-forward fit fails (empty: usable), each a short statement with its numbers."""
    if ff is None:
        return (f"no feed-forward fit: {why_none or 'the wheel never turned'}",)
    problems = []
    if not ff.r_squared >= MIN_FF_R2:
        problems.append(f"feed-forward R^2 {ff.r_squared:.3f} < {MIN_FF_R2}: the model does not describe the wheel")
    if ff.samples < MIN_FF_WINDOWS:
        problems.append(f"{ff.samples} windows with the wheel turning < {MIN_FF_WINDOWS}: too few to fit")
    for name, value in (("kV", ff.duty_per_radps), ("kA", ff.duty_per_radps2)):
        if not value > 0.0:
            problems.append(f"{name} {value:.3g} <= 0: the wrong sign (check polarity first)")
    if ff.static_duty < 0.0:
        problems.append(f"kS {ff.static_duty:.3g} < 0: friction cannot push (a reversed wheel, or a rate that does "
                        "not grow in a straight line with the duty: check polarity first, then the step fits' gains)")
    return tuple(problems)


def break_away(t: np.ndarray, duty: np.ndarray, rate: np.ndarray, lag_s: float, rest_band_radps: float,
               duty_per_radps: float) -> float | None:
    """The duty at which a slow ramp set the wheel turning; None: it never did.

    The rate is smoothed (Savitzky-Golay, BREAK_SMOOTH_S) and the rest band narrowed by the same filter's noise gain;
    at the first row from which the smoothed rate stays beyond it, in the ramp's direction, for BREAK_HOLD_S, the
    wheel turns at w. Along a slow ramp a first-order wheel trails the duty by its dead time plus time constant
    (`lag_s`) and turns at (duty - kS) / kV, so the duty that set it going is duty(t - lag) - kV w.
    """
    sign = np.sign(duty[np.argmax(np.abs(duty))]) if duty.size else 0.0
    dt = float(np.median(np.diff(t))) if t.size > 1 else 0.0
    window = int(round(BREAK_SMOOTH_S / dt)) // 2 * 2 + 1 if dt > 0.0 else 0
    hold = max(1, int(round(BREAK_HOLD_S / dt))) if dt > 0.0 else 0
    if sign == 0.0 or window < 5 or t.size < window + hold:
        return None
    smooth = signal.savgol_filter(rate, window, 2)
    band = rest_band_radps * float(np.sqrt(np.sum(signal.savgol_coeffs(window, 2) ** 2)))
    out = sign * smooth > band
    first = np.flatnonzero(np.lib.stride_tricks.sliding_window_view(out, hold).all(axis=1))
    if first.size == 0:
        return None
    i = int(first[0])
    k = max(0, int(np.searchsorted(t, t[i] - lag_s, side="right")) - 1)    # the duty held at t - lag
    return float(duty[k] - duty_per_radps * smooth[i])


@dataclass(frozen=True, slots=True)
class DutyStep:
    """One open-loop step of one wheel: the duty before and after it, from `t_start_s` to `t_end_s`."""

    segment: int
    name: str
    t_start_s: float
    t_end_s: float
    duty_before: float
    duty_after: float

    @property
    def linear(self) -> bool:
        """Between two levels that turn the wheel the same way: the static friction is the same before and after,
        so the step sees the motor's linear part alone (gain 1 / kV)."""
        return self.duty_before * self.duty_after > 0.0


@dataclass(frozen=True, slots=True)
class StepFit:
    step: DutyStep
    fit: FopdtFit | None
    problems: tuple[str, ...]


@dataclass(frozen=True, slots=True)
class WheelTuning:
    """What an identification run says about one wheel, and the gains it suggests (None with `problems`)."""

    wheel: str
    feedforward: FeedForward | None
    feedforward_problems: tuple[str, ...]
    steps: tuple[StepFit, ...]
    break_away: dict[str, float | None]       # "forwards" / "backwards": duty that first turned the wheel
    rest_band_radps: float
    gain: float | None                        # the model SIMC is applied to: wheel rad/s per duty
    tau_s: float | None
    dead_time_s: float | None
    gains: PiGains | None                     # continuous, duty per wheel rad/s
    gains_sampled: PiGains | None             # for a loop run every `period_s` (dead time + half a period)
    period_s: float
    problems: tuple[str, ...]                 # why there are no gains (empty: there are)
    duty_per_command: float = 1.0             # duty per recorded command unit (wheel rad/s of the profile's unit)


STEP_LEAD_S = 0.2           # the step fit starts this long before the step: the level it starts from


def _step_fit(t: np.ndarray, duty: np.ndarray, rate: np.ndarray, step: DutyStep) -> StepFit:
    """FOPDT fit of one step in deviation variables (from the level before): exact for the linear part of the motor,
    whatever the friction at the level it starts from."""
    rows = (t >= step.t_start_s - STEP_LEAD_S) & (t < step.t_end_s)
    before = rows & (t < step.t_start_s)
    if np.count_nonzero(before) == 0:
        return StepFit(step, None, ("no rows before the step",))
    fit = fit_fopdt(t[rows], duty[rows] - step.duty_before, rate[rows] - float(np.mean(rate[before])))
    return StepFit(step, fit, fit_problems(fit))


def _median(values: list[float]) -> float:
    return float(np.median(values))


def tune_wheel(wheel: str, t: np.ndarray, duty: np.ndarray, rate: np.ndarray, steps: list[DutyStep],
               ramps: list[tuple[str, float, float]], rest_band_radps: float, period_s: float,
               tau_c_s: float | None = None, duty_per_command: float = 1.0) -> WheelTuning:
    """Feed-forward, step fits, break-away and SIMC gains of one wheel from its open-loop identification rows.

    `duty` is what the wheel was commanded (-1 .. 1), `rate` what it measured (wheel rad/s); `ramps` are the slow
    break-away ramps as (direction, t_start_s, t_end_s).
    """
    fits = tuple(_step_fit(t, duty, rate, step) for step in steps)
    good = [f.fit for f in fits if f.fit is not None and not f.problems]
    linear = [f.fit for f in fits if f.fit is not None and not f.problems and f.step.linear]
    dead = _median([f.dead_time_s for f in (linear or good)]) if good else 0.0
    rows = np.zeros(t.size, dtype=bool)
    for step in steps:
        rows |= (t >= step.t_start_s) & (t < step.t_end_s)
    for _, start, end in ramps:
        rows |= (t >= start) & (t < end)
    ff: FeedForward | None = None
    why = ""
    try:
        ff = fit_feedforward(*window_regressors(t[rows], duty[rows], rate[rows], dead, rest_band_radps))
    except ValueError as error:
        why = str(error)
    ff_problems = feedforward_problems(ff, why)
    breaks = {}
    lag = dead + (_median([f.tau_s for f in (linear or good)]) if good else 0.0)
    for direction, start, end in ramps:
        span = (t >= start) & (t < end)
        breaks[direction] = break_away(t[span], duty[span], rate[span], lag, rest_band_radps,
                                       ff.duty_per_radps if ff is not None and not ff_problems else 0.0)
    problems: list[str] = []
    gain = tau = theta = None
    gains = sampled = None
    if not linear:
        failing = [f for f in fits if f.step.linear]
        problems.append("no step between two moving levels passes its quality gates" + (
            ": " + "; ".join(f"{f.step.name}: {', '.join(f.problems)}" for f in failing if f.problems)
            if failing else " (the program has none)"))
    else:
        low, high = min(f.gain for f in linear), max(f.gain for f in linear)
        if high > (1.0 + MAX_MODEL_DISAGREEMENT) * low:
            problems.append(f"the gain between moving levels changes from {low:.4g} to {high:.4g} rad/s per duty with "
                            f"the amplitude (more than {MAX_MODEL_DISAGREEMENT:.0%}): the motor is not linear over "
                            "this range (check for a current limit, a sagging supply, heavy drag)")
        gain = _median([f.gain for f in linear])
        tau = _median([f.tau_s for f in linear])
        theta = _median([f.dead_time_s for f in linear])
    if ff is None or ff_problems:
        problems.append("the feed-forward fit fails its quality gates")
    elif gain is not None and tau is not None:
        for name, steps_value, ff_value in (("gain", gain, 1.0 / ff.duty_per_radps),
                                            ("time constant", tau, ff.duty_per_radps2 / ff.duty_per_radps)):
            if abs(ff_value - steps_value) > MAX_MODEL_DISAGREEMENT * abs(steps_value):
                problems.append(f"the step fits' {name} {steps_value:.4g} and the feed-forward fit's {ff_value:.4g} "
                                f"differ by more than {MAX_MODEL_DISAGREEMENT:.0%}: the motor is not first order over "
                                "this range (check for a current limit, backlash, a coarse encoder)")
    if not problems and gain is not None and tau is not None and theta is not None:
        try:
            gains = simc_pi(gain, tau, theta, tau_c_s)
            sampled = simc_pi(gain, tau, theta + 0.5 * period_s, tau_c_s)
        except ValueError as error:
            problems.append(f"{error}: give --tau-c")
    return WheelTuning(wheel, ff, ff_problems, fits, breaks, rest_band_radps, gain, tau, theta, gains, sampled,
                       period_s, tuple(problems), duty_per_command)


def rest_band(rate: np.ndarray) -> float:
    """REST_SIGMAS standard deviations of a rate measured at rest (0 when there are too few samples)."""
    finite = rate[np.isfinite(rate)]
    return REST_SIGMAS * float(np.std(finite)) if finite.size >= 10 else 0.0


@dataclass(frozen=True, slots=True)
class Suggestion:
    """A wheel that has gains: its tuning with the feed-forward, continuous and sampled gains known to be there."""

    wheel: WheelTuning
    ff: FeedForward
    gains: PiGains
    sampled: PiGains


@dataclass(frozen=True, slots=True)
class Tuning:
    """The wheel speed loop suggestions of one identification run, both wheels."""

    wheels: dict[str, WheelTuning]
    period_s: float                 # the command period the sampled gains are for
    tau_c_s: float | None           # as asked (None: the SIMC default, tau_c = dead time)
    gear_ratio: float               # motor revolutions per wheel revolution (for gains per motor rpm)
    ticks_per_rev: float            # encoder ticks per motor revolution (0: unknown)

    def firmware_units(self) -> list[tuple[str, str, float]]:
        """(unit name, C suffix, units per wheel rad/s) for the speeds a firmware may measure in."""
        units = [("wheel rad/s", "RADPS", 1.0),
                 ("motor rpm", "RPM", WheelUnits(WheelUnit.RPM, gear_ratio=self.gear_ratio).per_radps)]
        if self.ticks_per_rev > 0.0:
            units.append(("encoder ticks/s", "TPS", WheelUnits(WheelUnit.TICKS_PER_S, self.ticks_per_rev,
                                                               self.gear_ratio).per_radps))
        return units

    @property
    def ready(self) -> list[Suggestion]:
        """The wheels with gains, each with its (passing) feed-forward and gains unwrapped."""
        return [Suggestion(w, w.feedforward, w.gains, w.gains_sampled) for w in self.wheels.values()
                if w.feedforward is not None and w.gains is not None and w.gains_sampled is not None]

    def sim_snippet(self) -> str | None:
        """[sim] keys to try the suggestion on the simulated robot (one set for both wheels: the more cautious
        wheel's PI, the mean feed-forward). None unless both wheels have gains."""
        ready = self.ready
        if len(ready) != len(self.wheels) or not ready:
            return None
        cautious = min(ready, key=lambda w: w.gains.kc)
        gains = cautious.gains
        ks = float(np.mean([w.ff.static_duty for w in ready]))
        kv = float(np.mean([w.ff.duty_per_radps for w in ready]))
        return "\n".join([
            f"# suggested by `diffdeck report`: SIMC PI, tau_c {gains.tau_c_s * 1e3:.1f} ms, of the "
            f"{cautious.wheel.wheel}",
            "# wheel (the more cautious), mean feed-forward; continuous gains (the simulated",
            "# firmware runs its loop every 1 ms); rates in wheel rad/s",
            "[sim]", 'wheel_loop = "pi"',
            f"pi_kp = {gains.kc:<10.4g}  # duty per rad/s of error",
            f"pi_ki = {gains.ki:<10.4g}  # duty per rad of summed error (kp / tau_I, tau_I "
            f"{gains.tau_i_s * 1e3:.1f} ms)",
            f"ff_ks = {ks:<10.4g}  # duty that overcomes friction",
            f"ff_kv = {kv:<10.4g}  # duty per rad/s of reference", ""])

    def c_header(self, source: str) -> str | None:
        """A C header with the constants for firmware (our own names), per wheel, in the encoder's unit when known."""
        ready = self.ready
        if len(ready) != len(self.wheels) or not ready:
            return None
        name, suffix, per_radps = self.firmware_units()[-1]
        lines = [f"/* Wheel speed loop constants suggested by diffdeck report from {source}.",
                 f" * Speeds in {name}; duty from -1 to 1. Each period of {self.period_s:g} s:",
                 " *   e = reference - measured;  sum += e (only while the duty is not clamped: anti-windup);",
                 " *   duty = FF_KS sign(reference) + FF_KV reference + FF_KA d(reference)/dt + PI_KP e + PI_KI_T sum,",
                 " *   clamped to +-1 (the console's shaped references are ramps: their rate of change is known).",
                 " * Try them on the simulated robot and on a stand (wheels off the ground) before the floor. */",
                 "#ifndef DIFFDECK_WHEEL_LOOP_H", "#define DIFFDECK_WHEEL_LOOP_H", "",
                 f"#define DDK_LOOP_PERIOD_S {self.period_s:.6g}f"]
        for suggestion in ready:
            wheel, ff = suggestion.wheel, suggestion.ff
            kp, ki_t = suggestion.sampled.in_unit(per_radps).per_period(self.period_s)
            tag = f"DDK_{wheel.wheel.upper()}"
            lines += ["", f"/* {wheel.wheel} wheel: gain {wheel.gain:.4g} rad/s per duty, time constant "
                          f"{(wheel.tau_s or 0.0) * 1e3:.1f} ms, dead time {(wheel.dead_time_s or 0.0) * 1e3:.1f} ms "
                          f"(+ half a period for the sampled loop) */",
                      f"#define {tag}_FF_KS {ff.static_duty:.6g}f",
                      f"#define {tag}_FF_KV_PER_{suffix} {ff.duty_per_radps / per_radps:.6g}f",
                      f"#define {tag}_FF_KA_PER_{suffix}_S {ff.duty_per_radps2 / per_radps:.6g}f",
                      f"#define {tag}_PI_KP_PER_{suffix} {kp:.6g}f",
                      f"#define {tag}_PI_KI_T_PER_{suffix} {ki_t:.6g}f"]
        lines += ["", "#endif", ""]
        return "\n".join(lines)
