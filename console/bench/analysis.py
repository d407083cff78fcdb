"""Response analysis on sampled signals: step metrics, first-order-plus-dead-time fits, derivatives, limit suggestions.

Pure numpy/scipy on arrays (no files): the report feeds it recordings, the tests feed it synthetic responses with
known parameters. Everything is vectorized so an hour at 100 Hz takes seconds.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np
from scipy import optimize, signal

RISE_LOW, RISE_HIGH = 0.1, 0.9          # 10-90 % rise time (common practice)
SETTLING_BAND = 0.02                    # 2 % settling criterion (Ogata, Modern Control Engineering, 5th ed., 2010,
                                        # transient-response specifications: "usually 2 % or 5 %"; from memory)
DEAD_BAND = 0.02                        # the response "starts" when it leaves 2 % of its change (common practice)
FINAL_SHARE = 0.1                       # the steady state is the mean of the last 10 % of a step's window
REST_WINDOW_S = 1.0                     # the noise at rest is measured over up to 1 s before the step
NOISE_BAND_SIGMAS = 5.0                 # a settling band noise alone cannot leave: Gaussian noise passes 5 sigma with
                                        # probability 5.7e-7 per sample, about 1e-3 in a 20 s window at 100 Hz
MIN_RESPONSE_SHARE = 0.05              # a response that changes by less than 5 % of the step did not follow it
MIN_STEP_SAMPLES = 10                   # fewer samples after a step: no step metrics (our choice)
ACCEL_WINDOW_S = 0.15                   # Savitzky-Golay window for the first derivative
JERK_WINDOW_S = 0.3                     # and for the second


@dataclass(frozen=True, slots=True)
class StepMetrics:
    """Metrics of one step of the request from `request_before` to `request_after` at `t_step_s`.

    Times are measured from the request step. Rise, overshoot and settling refer to the response's own change
    (initial -> final); the steady-state error is request_after - final. None: not measurable in this window.
    """

    t_step_s: float
    request_before: float
    request_after: float
    initial: float
    final: float
    dead_time_s: float | None
    rise_time_s: float | None
    overshoot_pct: float | None
    settling_time_s: float | None
    steady_state_error: float
    settling_band_pct: float = 100 * SETTLING_BAND   # widened to 5 sigma of the noise at rest when that is larger


def _first_crossing(t: np.ndarray, z: np.ndarray, level: float) -> float | None:
    """Linearly interpolated time at which z first reaches `level` (z rising), None if it never does."""
    above = np.flatnonzero(z >= level)
    if above.size == 0:
        return None
    i = int(above[0])
    if i == 0:
        return float(t[0])
    z0, z1 = z[i - 1], z[i]
    return float(t[i - 1] + (level - z0) / (z1 - z0) * (t[i] - t[i - 1]))


def step_metrics(t: np.ndarray, y: np.ndarray, t_step: float, request_before: float, request_after: float,
                 t_end: float | None = None) -> StepMetrics | None:
    """Step metrics of response y(t) to a request step at t_step; the window ends at t_end (default: last sample)."""
    t_end = float(t[-1]) if t_end is None else t_end
    valid = np.isfinite(y)
    after = valid & (t >= t_step) & (t <= t_end)
    before = valid & (t < t_step) & (t >= t_step - 0.25)
    if np.count_nonzero(after) < MIN_STEP_SAMPLES:
        return None
    ta, ya = t[after], y[after]
    initial = float(np.mean(y[before])) if np.any(before) else float(ya[0])
    tail = max(3, int(math.ceil(FINAL_SHARE * ta.size)))
    final = float(np.mean(ya[-tail:]))
    rest = valid & (t < t_step) & (t >= t_step - REST_WINDOW_S)
    # the noise of the measurement at rest before the step; without a lead, the steady tail's (it may hold motion)
    noise = float(np.std(y[rest])) if np.count_nonzero(rest) >= MIN_STEP_SAMPLES else float(np.std(ya[-tail:]))
    change = final - initial
    error = request_after - final
    if abs(change) < 1e-9 or abs(change) < MIN_RESPONSE_SHARE * abs(request_after - request_before):
        return StepMetrics(t_step, request_before, request_after, initial, final, None, None, None, None, error)
    z = (ya - initial) / change
    rel = ta - t_step
    dead = _first_crossing(rel, z, DEAD_BAND)
    t10, t90 = _first_crossing(rel, z, RISE_LOW), _first_crossing(rel, z, RISE_HIGH)
    rise = None if t10 is None or t90 is None else t90 - t10
    overshoot = max(0.0, float(np.max(z)) - 1.0) * 100.0
    band = max(SETTLING_BAND, NOISE_BAND_SIGMAS * noise / abs(change))
    outside = np.flatnonzero(np.abs(z - 1.0) > band)
    if outside.size == 0:
        settling: float | None = 0.0
    elif outside[-1] >= z.size - 1:
        settling = None                                    # still outside the band at the end of the window
    else:
        i = int(outside[-1])
        e0, e1 = abs(z[i] - 1.0), abs(z[i + 1] - 1.0)
        settling = float(rel[i] + (e0 - band) / (e0 - e1) * (rel[i + 1] - rel[i])) if e0 != e1 \
            else float(rel[i + 1])
    return StepMetrics(t_step, request_before, request_after, initial, final, dead, rise, overshoot, settling, error,
                       100.0 * band)


# --- first order plus dead time ----------------------------------------------------------------------------------

@dataclass(frozen=True, slots=True)
class FopdtFit:
    """y' = (gain * u_d(t - dead_time) - y) / tau, fitted to a recorded command u and response y.

    u_d is u with an input deadband (|u| < deadband gives no motion): a motor's static friction. Without it the
    fit of a real (or the simulated) wheel trades the late start after every standstill for a too short time constant
    (about -20 % for the demo cart's 0.3 rad/s); deadband 0 is the plain first-order-plus-dead-time model.
    """

    gain: float
    tau_s: float
    dead_time_s: float
    deadband: float      # in the command's unit
    r2: float            # coefficient of determination
    nrmse: float         # RMS error / (max y - min y)
    samples: int
    moving_samples: int = 0              # samples where the command is away from rest (what the fit learns from)
    at_bound: tuple[str, ...] = ()       # parameters the search ended on a bound of (not the physical dead time 0)

    @property
    def lag_s(self) -> float:
        """tau + dead time: how far a ramp's response trails the command (first-order ramp response)."""
        return self.tau_s + self.dead_time_s


MIN_FIT_R2 = 0.9            # our choice: healthy wheels fit with R^2 > 0.99; a wiring fault gives about 0 to 0.1
MIN_MOVING_SAMPLES = 50     # our choice: 0.5 s of commanded motion at 100 Hz for gain, time constant and dead time
MOVING_SHARE = 0.05         # a command beyond 5 % of its largest magnitude counts as "moving"


def fit_problems(fit: FopdtFit | None) -> tuple[str, ...]:
    """The quality gates a wheel fit fails, each as a short statement with its numbers (empty: the fit is usable).

    A suggestion built on a fit that fails any of them would be advice from a model that does not describe the
    wheel: a poor fit (R^2), a parameter the search could not place (at a bound), a wheel answering with the opposite
    sign (a wiring fault: polarity comes before limits), or too little commanded motion to learn from.
    """
    if fit is None:
        return ("no fit: the command or the measurement never moved",)
    problems = []
    if fit.gain <= 0.0:
        problems.append(f"gain {fit.gain:.3g} <= 0: the wrong sign (the wheel measures against its command)")
    if not fit.r2 >= MIN_FIT_R2:
        problems.append(f"R^2 {fit.r2:.3f} < {MIN_FIT_R2}: the first-order model does not describe the response")
    for name in fit.at_bound:
        problems.append(f"{name} at its search bound: the fit could not place it")
    if fit.moving_samples < MIN_MOVING_SAMPLES:
        problems.append(f"{fit.moving_samples} samples with the command moving < {MIN_MOVING_SAMPLES}: too few to fit")
    return tuple(problems)


def _uniform(t: np.ndarray, *signals: np.ndarray) -> tuple[float, np.ndarray, list[np.ndarray]]:
    """Resample onto a uniform grid at the median period (loop rows are nearly uniform already)."""
    dt = float(np.median(np.diff(t)))
    grid = t[0] + dt * np.arange(int(round((t[-1] - t[0]) / dt)) + 1)
    return dt, grid, [np.interp(grid, t, s) for s in signals]


def delay(x: np.ndarray, samples: float, fill: float) -> np.ndarray:
    """x delayed by a fractional number of samples (linear interpolation between the two neighbours), `fill` before."""
    whole = int(math.floor(samples))
    frac = samples - whole
    padded = np.concatenate([np.full(min(whole + 1, x.size), fill), x])[: x.size + 1]
    shifted = padded[1:] if whole + 1 <= x.size else padded[:x.size]
    later = padded[:-1]
    return shifted if frac == 0.0 else (1.0 - frac) * shifted + frac * later


def simulate_fopdt(dt: float, u: np.ndarray, gain: float, tau: float, dead: float, y0: float,
                   deadband: float = 0.0) -> np.ndarray:
    """Response on a uniform grid: exact discretization for a piecewise-constant input, fractional-sample delay."""
    if deadband > 0.0:
        u = np.where(np.abs(u) < deadband, 0.0, u)
    a = math.exp(-dt / tau)
    forced = signal.lfilter([0.0, (1.0 - a) * gain], [1.0, -a], delay(u, dead / dt, float(u[0])))
    if y0 != 0.0:
        forced += y0 * np.exp(np.arange(u.size) * (-dt / tau))
    return forced


COARSE_POINTS = 6000
DEAD_SHARES = np.linspace(0.0, 1.0, 16)
TAU_GRID = np.geomspace(1e-3, 5.0, 22)
DEADBAND_SHARES = np.concatenate([[0.0], np.geomspace(0.004, 0.15, 10)])   # of the largest |command|


def fit_fopdt(t: np.ndarray, u: np.ndarray, y: np.ndarray, max_dead_s: float = 0.5) -> FopdtFit | None:
    """Least-squares fit (scipy.optimize.least_squares) from a coarse grid start; None if u or y never moves.

    The grid runs over deadband, time constant and dead time with the gain solved linearly for each, on at most
    COARSE_POINTS averaged samples; the refinement runs on every sample with the best deadband.
    """
    keep = np.isfinite(u) & np.isfinite(y) & np.isfinite(t)
    if np.count_nonzero(keep) < 20 or np.ptp(u[keep]) <= 0.0 or np.ptp(y[keep]) <= 0.0:
        return None
    dt, _, (u_grid, y_grid) = _uniform(t[keep], u[keep], y[keep])
    y0 = float(y_grid[0])
    step = max(1, u_grid.size // COARSE_POINTS)
    n = (u_grid.size // step) * step
    y_c = y_grid[:n].reshape(-1, step).mean(axis=1)
    dt_c = dt * step
    u_max = float(np.max(np.abs(u_grid)))
    best = (math.inf, 1.0, 0.1, 0.0, 0.0)
    k = np.arange(y_c.size, dtype=float)
    for deadband in DEADBAND_SHARES * u_max:
        u_db = np.where(np.abs(u_grid) < deadband, 0.0, u_grid)
        u_c = u_db[:n].reshape(-1, step).mean(axis=1)
        for tau in TAU_GRID[TAU_GRID >= dt / 2]:
            a = math.exp(-dt_c / tau)
            decay = y0 * np.exp(k * (-dt_c / tau))
            target = y_c - decay
            # the lag and the delay commute for a command that starts at rest: filter once, delay per candidate
            lagged = signal.lfilter([0.0, 1.0 - a], [1.0, -a], u_c)
            for dead in DEAD_SHARES * max_dead_s:
                unit = delay(lagged, dead / dt_c, 0.0)
                norm = float(unit @ unit)
                if norm <= 0.0:
                    continue
                gain = float(target @ unit) / norm
                cost = float(target @ target) - gain * gain * norm      # least-squares residual for that gain
                if cost < best[0]:
                    best = (cost, gain, tau, dead, deadband)
    _, gain0, tau0, dead0, deadband = best
    u_fit = np.where(np.abs(u_grid) < deadband, 0.0, u_grid)

    def residual(p: np.ndarray) -> np.ndarray:
        return simulate_fopdt(dt, u_fit, p[0], p[1], p[2], y0) - y_grid

    lower, upper = [-100.0, dt / 20, 0.0], [100.0, 20.0, max_dead_s * 2]
    start = np.clip([gain0, tau0, dead0], np.add(lower, 1e-9), np.subtract(upper, 1e-9))
    result = optimize.least_squares(residual, start, bounds=(lower, upper), x_scale=[1.0, 0.05, 0.01],
                                     xtol=1e-6, ftol=1e-8)
    gain, tau, dead = (float(v) for v in result.x)
    # within 1 % of a bound (the search's iterates stay strictly inside); a dead time of 0 is physical, not a limit
    at_bound = tuple(name for name, value, low, high in zip(("gain", "time constant", "dead time"), result.x,
                                                            lower, upper)
                     if any(bound != 0.0 and abs(value - bound) <= 0.01 * abs(bound) for bound in (low, high)))
    moving = int(np.count_nonzero(np.abs(u_grid) > MOVING_SHARE * u_max))
    res = result.fun
    total = float(np.sum((y_grid - y_grid.mean()) ** 2))
    r2 = 1.0 - float(res @ res) / total if total > 0 else math.nan
    nrmse = float(np.sqrt(np.mean(res ** 2))) / float(np.ptp(y_grid))
    return FopdtFit(gain, tau, dead, float(deadband), r2, nrmse, int(y_grid.size), moving, at_bound)


# --- derivatives -------------------------------------------------------------------------------------------------

def _window(dt: float, seconds: float, polyorder: int) -> int:
    length = max(polyorder + 2, int(round(seconds / dt)))
    return length + 1 if length % 2 == 0 else length


def derivative(t: np.ndarray, y: np.ndarray, order: int) -> np.ndarray:
    """First (order 1) or second (order 2) derivative by Savitzky-Golay smoothing (scipy.signal.savgol_filter).

    Measured rates are quantized and sample-held, so plain differences would turn into spikes; NaNs are filled by
    interpolation first. Assumes nearly uniform sampling (loop rows).
    """
    good = np.isfinite(y)
    if np.count_nonzero(good) < 5:
        return np.full_like(y, np.nan)
    filled = np.interp(t, t[good], y[good])
    dt = float(np.median(np.diff(t)))
    polyorder = 2 if order == 1 else 3
    window = _window(dt, ACCEL_WINDOW_S if order == 1 else JERK_WINDOW_S, polyorder)
    if window > filled.size:
        window = filled.size if filled.size % 2 else filled.size - 1
        if window <= polyorder:
            return np.full_like(y, np.nan)
    return signal.savgol_filter(filled, window, polyorder, deriv=order, delta=dt, mode="interp")


# --- suggested limits --------------------------------------------------------------------------------------------

ACCEL_ERROR_SHARE = 0.25   # the acceleration may trail the command by at most 25 % of the suggested acceleration


RAMP_SHARE = 0.5           # ramp rows: the command accelerates at more than half its peak acceleration
MIN_RAMP_ROWS = 20


def ramp_lag(t: np.ndarray, command: np.ndarray, measured: np.ndarray, rows: np.ndarray | None = None) -> float | None:
    """How long the measurement trails the command while it ramps: median of (command - measured) / acceleration.

    Measured directly on the recording's ramps (rows where the command accelerates hard), so it includes what a
    model fit leaves out (telemetry sampling, link latency, the deadband's catch-up). `rows` selects the usable rows
    (e.g. not around the shaper, where steps would count as infinite accelerations). None: too few ramp rows.
    """
    accel = derivative(t, command, 1)
    usable = np.isfinite(accel) & np.isfinite(measured) & (True if rows is None else rows)
    if not np.any(usable):
        return None
    peak = float(np.max(np.abs(accel[usable])))
    ramp = usable & (np.abs(accel) > RAMP_SHARE * peak)
    if peak <= 0.0 or np.count_nonzero(ramp) < MIN_RAMP_ROWS:
        return None
    lag = float(np.median((command[ramp] - measured[ramp]) / accel[ramp]))
    return lag if lag > 0.0 else None


@dataclass(frozen=True, slots=True)
class SuggestedLimits:
    """Limits a wheel follows within a stated tracking error.

    A first-order lag with dead time trails a ramp of slope a by a * (tau + dead) once the transient has passed
    (the unit-ramp response of a first-order system, Ogata, Modern Control Engineering, 5th ed., 2010, section on
    first-order systems, from memory); its acceleration obeys the same equation, so it trails a jerk j by
    j * (tau + dead). The lag used is the one measured on the recording's ramps when there are enough of them
    (`ramp_lag`), else tau + dead time of the FOPDT fit; the slower wheel decides.
    """

    speed_error_mps: float
    wheel_accel_radps2: float
    wheel_jerk_radps3: float
    accel_mps2: float
    jerk_mps3: float
    turn_accel_radps2: float
    turn_jerk_radps3: float
    from_wheel: str
    lag_s: float
    lag_source: str           # "ramps" (measured) or "fit"

    def snippet(self, source: str, current: dict[str, object] | None = None) -> str:
        """A [limits] table to paste; `current` (the profile's [limits]) adds what each key is now."""
        current = current or {}
        values = {"accel_mps2": self.accel_mps2, "decel_mps2": self.accel_mps2, "jerk_mps3": self.jerk_mps3,
                  "turn_accel_radps2": self.turn_accel_radps2, "turn_jerk_radps3": self.turn_jerk_radps3}
        # not wheel_accel_radps2: that key caps every wheel acceleration, the fast stop's too
        how = "measured on the recording's ramps" if self.lag_source == "ramps" else "tau + dead time of its fit"
        lines = [f"# suggested by `diffdeck report` from {source}: speed tracking error <= "
                 f"{self.speed_error_mps:.3g} m/s,",
                 f"# acceleration trailing by <= {ACCEL_ERROR_SHARE:.0%}; the {self.from_wheel} wheel trails by "
                 f"{self.lag_s * 1e3:.0f} ms ({how})", "[limits]"]
        for key, value in values.items():
            now = current.get(key)
            lines.append(f"{key} = {value:.3g}" + (f"    # now {now}" if now is not None else ""))
        return "\n".join(lines) + "\n"


def suggest_limits(fits: dict[str, FopdtFit | None], wheel_radius_m: float, track_width_m: float,
                   speed_error_mps: float, ramp_lags: dict[str, float | None] | None = None) -> SuggestedLimits | None:
    """From the slower wheel: the acceleration and jerk it follows within `speed_error_mps`."""
    ramp_lags = ramp_lags or {}
    lags: dict[str, tuple[float, str]] = {}
    for name, fit in fits.items():
        ramp_lag = ramp_lags.get(name)
        if ramp_lag:
            lags[name] = (float(ramp_lag), "ramps")
        elif fit is not None and fit.lag_s > 0:
            lags[name] = (fit.lag_s, "fit")
    if not lags:
        return None
    name, (lag, source) = max(lags.items(), key=lambda item: item[1][0])
    wheel_error = speed_error_mps / wheel_radius_m
    accel = wheel_error / lag
    jerk = ACCEL_ERROR_SHARE * accel / lag
    spin = 2.0 * wheel_radius_m / track_width_m
    return SuggestedLimits(speed_error_mps, accel, jerk, wheel_radius_m * accel, wheel_radius_m * jerk,
                           spin * accel, spin * jerk, name, lag, source)
