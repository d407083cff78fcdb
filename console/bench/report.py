"""The bench report: per-segment metrics, per-wheel FOPDT fits, suggested limits, polarity, figures and Markdown.

`analyze` turns a Recording into a Report (numbers only); `write_report` writes summary.md, report.json and the PNG
figures (matplotlib, Agg backend) into one directory. Both are vectorized: an hour at 100 Hz takes seconds.
"""

from __future__ import annotations

import dataclasses
import json
import math
import os
import shutil
import tempfile
import textwrap
from dataclasses import dataclass
from pathlib import Path
from typing import Any

import numpy as np

from console.bench import analysis
from console.bench import tuning as tuning_mod
from console.bench.analysis import FopdtFit, StepMetrics, SuggestedLimits
from console.bench.polarity import PolarityReport, check_polarity
from console.bench.program import BoundSegment, Kind
from console.bench.recording import Recording
from console.bench.tuning import DutyStep, Tuning, rest_band, tune_wheel
from console.errors import OutputError
from console.files import atomic_output, check_output, make_folders, reason, remove_folders, write_atomic
from console.record import sidecar_path
from shaping.body import Body, tip_and_grip

DEFAULT_SPEED_ERROR_SHARE = 0.05    # stated tracking error for the suggested limits: 5 % of the top speed
DEFAULT_SPEED_ERROR_MPS = 0.05      # when the top speed is unknown (no bench sidecar)
PLOT_POINTS = 4000                  # per line: min/max pairs keep the peaks of long recordings
FIGURES = ("response.png", "acceleration.png", "tracking.png")
TUNING_HEADER = "wheel_loop.h"      # the C header with the suggested constants (identification runs with gains)
TUNING_FIGURE = "wheel_loop.png"    # identification runs: each wheel's steps with their fitted models
UNITS = {"speed": "m/s", "turn": "rad/s", "left": "rad/s", "right": "rad/s"}


@dataclass(frozen=True, slots=True)
class SegmentReport:
    index: int
    name: str
    kind: str
    axis: str
    unit: str
    bypass: bool
    t_start_s: float
    t_end_s: float
    step: StepMetrics | None          # step segments; square waves: the median over their edges
    edges: int
    peak_accel: float | None          # achieved (measured), axis unit per s
    peak_jerk: float | None
    peak_accel_cmd: float | None      # what was commanded (shaped, or raw around the shaper)
    peak_jerk_cmd: float | None
    tracking_rms: float | None        # command - measured on the axis
    mismatch_rms_radps: float | None  # (left error) - (right error), rad/s
    mismatch_peak_radps: float | None


@dataclass(frozen=True, slots=True)
class BodyPeak:
    """A measured peak acceleration of the body against the static limit of the profile's [body] that binds it."""

    what: str                 # "acceleration", "deceleration", "sideways acceleration"
    measured_mps2: float
    limit: str                # "tipping over the back", "traction", ...
    limit_mps2: float

    @property
    def exceeded(self) -> bool:
        return self.measured_mps2 > self.limit_mps2

    def text(self) -> str:
        share = self.measured_mps2 / self.limit_mps2 if self.limit_mps2 > 0 else math.inf
        return (f"peak {self.what} {self.measured_mps2:.3g} m/s^2 is {share:.0%} of the static limit for "
                f"{self.limit} ({self.limit_mps2:.3g} m/s^2)" + (": BEYOND it" if self.exceeded else ""))


BODY_CAUTION = ("static figures on level ground: slopes, payload shifts, bumps and the robot's own dynamics lower "
                "them; measured on a stand (wheels off the ground), the peaks are what the body would feel if it "
                "followed the wheels on the floor. Defer to local codes and licensed practice for anything people "
                "ride on or work beside.")


@dataclass(frozen=True, slots=True)
class Report:
    recording: str
    robot: str | None                    # the profile's robot name, when the recorder's sidecar has it
    program: str | None
    duration_s: float
    rows: int
    segments: tuple[SegmentReport, ...]
    fits: dict[str, FopdtFit | None]
    fit_problems: dict[str, tuple[str, ...]]   # the quality gates each wheel fit fails (empty: usable)
    limits: SuggestedLimits | None             # only from fits that pass and a robot without wiring faults
    polarity: PolarityReport | None
    notes: tuple[str, ...]
    profile_limits: dict[str, object]    # the [limits] of the profile the recording was made with (if known)
    tuning: Tuning | None = None         # wheel speed loop suggestions from an open-loop identification run
    body: tuple[BodyPeak, ...] = ()      # measured peaks against the [body]'s static tip-over and traction limits

    def limits_snippet(self) -> str | None:
        return self.limits.snippet(Path(self.recording).name, self.profile_limits) if self.limits else None

    def to_json(self) -> dict[str, Any]:
        def plain(value: Any) -> Any:
            if dataclasses.is_dataclass(value):
                out = {f.name: plain(getattr(value, f.name)) for f in dataclasses.fields(value)}
                if isinstance(value, FopdtFit):
                    out["lag_s"] = value.lag_s
                return out
            if isinstance(value, dict):
                return {k: plain(v) for k, v in value.items()}
            if isinstance(value, list | tuple):
                return [plain(v) for v in value]
            if isinstance(value, float) and not math.isfinite(value):
                return None
            return value

        data = plain(self)
        data["limits_snippet"] = self.limits_snippet()
        data["polarity_snippet"] = self.polarity.snippet() if self.polarity else None
        data["polarity_candidate_blocks"] = self.polarity.candidate_blocks() if self.polarity else None
        data["tuning_sim_snippet"] = self.tuning.sim_snippet() if self.tuning else None
        data["tuning_c_header"] = self.tuning.c_header(Path(self.recording).name) if self.tuning else None
        return data


class _Signals:
    """The axis signals of a recording (request, command, measurement) and their derivatives, computed once."""

    def __init__(self, rec: Recording) -> None:
        d = rec.data
        self.t = rec.t
        self.rec = rec
        self.meas_l, self.meas_r = d["left_meas_radps"], d["right_meas_radps"]
        self.cmd_l, self.cmd_r = d["left_cmd_radps"], d["right_cmd_radps"]
        self.body = rec.wheel_radius_m is not None and rec.track_width_m is not None
        self._deriv: dict[tuple[str, str, int], np.ndarray] = {}

    def axis(self, axis: str) -> tuple[np.ndarray, np.ndarray, np.ndarray] | None:
        """(request, command, measured) on an axis, or None without geometry for body axes."""
        d, rec = self.rec.data, self.rec
        if axis in ("left", "right"):
            req = self._wheel_request(axis)
            return (req, self.cmd_l, self.meas_l) if axis == "left" else (req, self.cmd_r, self.meas_r)
        r, w = rec.wheel_radius_m, rec.track_width_m
        if r is None or w is None:
            return None
        if axis == "speed":
            return d["v_req_mps"], d["v_mps"], 0.5 * r * (self.meas_l + self.meas_r)
        return d["omega_req_radps"], d["omega_radps"], r * (self.meas_r - self.meas_l) / w

    def _wheel_request(self, axis: str) -> np.ndarray:
        d, rec = self.rec.data, self.rec
        if rec.wheel_radius_m is None or rec.track_width_m is None:
            return d[f"{axis}_cmd_radps"]
        half = 0.5 * rec.track_width_m * d["omega_req_radps"]
        sign = -1.0 if axis == "left" else 1.0
        return (d["v_req_mps"] + sign * half) / rec.wheel_radius_m

    def series(self, axis: str) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
        """`axis()` for an axis it has (callers pick those first)."""
        signals = self.axis(axis)
        if signals is None:
            raise ValueError(f"no {axis} signals: the recording lacks the robot's geometry")
        return signals

    def derivative(self, axis: str, which: str, order: int) -> np.ndarray:
        key = (axis, which, order)
        if key not in self._deriv:
            self._deriv[key] = analysis.derivative(self.t, self.series(axis)[1 if which == "cmd" else 2], order)
        return self._deriv[key]


def _edges(seg: BoundSegment) -> list[float]:
    written = seg.segment
    if written.kind is Kind.STEP:
        return [seg.t_start_s + written.lead_s]
    if written.kind is Kind.SQUARE and written.period_s > 0:
        return list(seg.t_start_s + np.arange(0.0, seg.t_end_s - seg.t_start_s - 1e-9, written.period_s / 2))
    return []


def _median_metrics(metrics: list[StepMetrics]) -> StepMetrics | None:
    if not metrics:
        return None
    if len(metrics) == 1:
        return metrics[0]

    def med(name: str) -> float | None:
        values = [getattr(m, name) for m in metrics if getattr(m, name) is not None]
        return float(np.median(values)) if values else None

    first = metrics[0]
    return StepMetrics(first.t_step_s, first.request_before, first.request_after, first.initial, first.final,
                       med("dead_time_s"), med("rise_time_s"), med("overshoot_pct"), med("settling_time_s"),
                       float(np.median([m.steady_state_error for m in metrics])),
                       float(np.max([m.settling_band_pct for m in metrics])))


def _peak(values: np.ndarray | None, rows: np.ndarray) -> float | None:
    if values is None or not np.any(rows):
        return None
    chunk = np.abs(values[rows])
    return float(np.nanmax(chunk)) if np.any(np.isfinite(chunk)) else None


def _step_problem(seg: BoundSegment, m: StepMetrics) -> str | None:
    """Why a step's metrics do not describe the wheel: the response moved against the request, or hardly at all."""
    asked, moved = m.request_after - m.request_before, m.final - m.initial
    if asked == 0.0:
        return None
    if abs(moved) < analysis.MIN_RESPONSE_SHARE * abs(asked):
        return (f"segment {seg.segment.index} '{seg.segment.name}': the response did not follow the request step "
                f"({moved:+.3g} for {asked:+.3g}): no step metrics; check polarity and a dead wheel first")
    if moved * asked < 0.0:
        return (f"segment {seg.segment.index} '{seg.segment.name}': the response moved against the request step "
                f"({moved:+.3g} for {asked:+.3g}): check polarity first")
    return None


def _segment_report(sig: _Signals, seg: BoundSegment) -> tuple[SegmentReport, list[str]]:
    """The segment's metrics and the notes on steps they could not be measured from."""
    t = sig.t
    written = seg.segment
    rows = (t >= seg.t_start_s) & (t < seg.t_end_s)
    axis = written.axis.value if sig.axis(written.axis.value) is not None else "left"
    req, cmd, meas = sig.series(axis)
    metrics, notes = [], []
    edges = _edges(seg)
    for i, edge in enumerate(edges):
        end = edges[i + 1] if i + 1 < len(edges) else seg.t_end_s
        before = req[(t < edge)][-1:] if np.any(t < edge) else req[:1]
        after = req[(t >= edge + 1e-9)][:1]
        if after.size == 0:
            continue
        m = analysis.step_metrics(t, meas, edge, float(before[0]), float(after[0]), end)
        problem = f"segment {written.index} '{written.name}': fewer than {analysis.MIN_STEP_SAMPLES} samples " \
                  f"after the step at {edge:.2f} s: no step metrics" if m is None else _step_problem(seg, m)
        if problem is not None and problem not in notes:
            notes.append(problem)
        if m is not None and problem is None:
            metrics.append(m)
    err_l = sig.cmd_l - sig.meas_l
    err_r = sig.cmd_r - sig.meas_r
    mismatch = (err_l - err_r)[rows]
    track = (cmd - meas)[rows]
    finite = np.isfinite(track)
    return SegmentReport(
        written.index, written.name, written.kind.value, axis, UNITS[axis], written.bypass, seg.t_start_s, seg.t_end_s,
        _median_metrics(metrics), len(metrics),
        _peak(sig.derivative(axis, "meas", 1), rows), _peak(sig.derivative(axis, "meas", 2), rows),
        _peak(sig.derivative(axis, "cmd", 1), rows), _peak(sig.derivative(axis, "cmd", 2), rows),
        float(np.sqrt(np.mean(track[finite] ** 2))) if np.any(finite) else None,
        float(np.sqrt(np.nanmean(mismatch ** 2))) if np.any(np.isfinite(mismatch)) else None,
        float(np.nanmax(np.abs(mismatch))) if np.any(np.isfinite(mismatch)) else None,
    ), notes


def analyze(rec: Recording, speed_error_mps: float | None = None, tau_c_s: float | None = None) -> Report:
    sig = _Signals(rec)
    notes: list[str] = []
    if not sig.body:
        notes.append("no geometry in the sidecars: speed and turn-rate metrics and suggested limits are left out")
    if rec.bench is None:
        notes.append("no bench sidecar (<csv>.bench.json): the whole recording is one segment")
    fits = {w: analysis.fit_fopdt(rec.t, rec.data[f"{w}_cmd_radps"], rec.data[f"{w}_meas_radps"])
            for w in ("left", "right")}
    problems = {w: analysis.fit_problems(fit) for w, fit in fits.items()}
    polarity = check_polarity(rec, _profile_table(rec, "units"))
    wiring = [f.kind for f in polarity.findings if f.kind != "ok"] if polarity is not None else []
    reversed_fit = [w for w, fit in fits.items() if fit is not None and fit.gain <= 0.0]
    if "ambiguous" in wiring:
        notes.append("check polarity first: several wirings explain this run; do the hand check the polarity check "
                     "names (below), apply the one [units] block that matches, run the `polarity` bench program "
                     "again, then tune limits")
    elif wiring:
        notes.append(f"check polarity first: the polarity check found: {', '.join(wiring)}; fix [units] as it "
                     "says (below), run the `polarity` bench program again, then tune limits")
    elif reversed_fit:
        notes.append(f"check polarity first: the {' and '.join(reversed_fit)} wheel's fit has a gain of the wrong "
                     "sign; run the `polarity` bench program and fix [units] before tuning limits")
    notes += [f"{w} wheel fit fails its quality gates: {'; '.join(p)}" for w, p in problems.items() if p]
    segments, step_notes = [], []
    for seg in rec.segments:
        segment, segment_notes = _segment_report(sig, seg)
        segments.append(segment)
        step_notes += segment_notes
    failed = [w for w, p in problems.items() if p]
    limits = None
    radius, track = rec.wheel_radius_m, rec.track_width_m
    tuning = _tuning(rec, tau_c_s, notes)
    if radius is not None and track is not None and (wiring or failed):
        notes.append("no limits suggested: " + (
            "a wiring fault comes first (see the polarity check)" if wiring else
            f"the {' and '.join(failed)} wheel fit{'s fail' if len(failed) > 1 else ' fails'} its quality gates"))
    elif radius is not None and track is not None and tuning is not None:
        notes.append("no limits suggested: an open-loop identification run describes the motors without their speed "
                     "loop; put the loop in (see the wheel speed loop section), then run a bench program for limits")
    elif radius is not None and track is not None:
        if speed_error_mps is None:
            speed_error_mps = (DEFAULT_SPEED_ERROR_SHARE * rec.top_speed_mps if rec.top_speed_mps
                               else DEFAULT_SPEED_ERROR_MPS)
        shaped = np.ones(rec.t.size, dtype=bool)
        for seg in rec.segments:
            if seg.segment.bypass:
                shaped &= ~((rec.t >= seg.t_start_s) & (rec.t < seg.t_end_s + 0.5))   # + the hand-back ramp
        lags = {w: analysis.ramp_lag(rec.t, rec.data[f"{w}_cmd_radps"], rec.data[f"{w}_meas_radps"], shaped)
                for w in ("left", "right")}
        limits = analysis.suggest_limits(fits, radius, track, speed_error_mps, lags)
    return Report(str(rec.path), _profile(rec).get("name"), rec.program, float(rec.t[-1] - rec.t[0]),
                  int(rec.t.size), tuple(segments), fits, problems, limits, polarity, (*notes, *step_notes),
                  _profile_table(rec, "limits"), tuning, _body_peaks(sig))


def _body_peaks(sig: _Signals) -> tuple[BodyPeak, ...]:
    """The measured peaks (speed derivative, v omega) against the static limits of the profile's [body], if any.

    Speeding up tips the body over the back, slowing down over the front (shaping.body); the tyres' traction caps
    both and the sideways acceleration too. The lower of the two limits binds.
    """
    table = _profile_table(sig.rec, "body")
    rec = sig.rec
    if not table or rec.track_width_m is None or rec.wheel_radius_m is None:
        return ()
    try:
        body = Body(mass_kg=None, cog_height_m=_number(table, "cog_height_m", math.nan),
                    cog_ahead_m=_number(table, "cog_ahead_m", 0.0),
                    support_ahead_m=_number(table, "support_ahead_m", 0.0),
                    support_behind_m=_number(table, "support_behind_m", 0.0),
                    drive_load_share=_number(table, "drive_load_share", 1.0),
                    tyre_friction=_number(table, "tyre_friction", math.nan))
        grip = tip_and_grip(body, rec.track_width_m)
    except (ArithmeticError, ValueError):
        return ()
    if not all(math.isfinite(x) and x > 0 for x in (grip.sideways_tip_mps2, grip.traction_mps2)):
        return ()
    accel = sig.derivative("speed", "meas", 1)
    _, _, speed = sig.series("speed")
    _, _, turn = sig.series("turn")
    peaks = []
    for what, values, tip, edge in (
            ("acceleration", accel, grip.backward_tip_mps2, "tipping over the back"),
            ("deceleration", -accel, grip.forward_tip_mps2, "tipping over the front"),
            ("sideways acceleration", np.abs(speed * turn), grip.sideways_tip_mps2, "tipping sideways")):
        finite = values[np.isfinite(values)]
        if finite.size == 0:
            continue
        limit, name = (tip, edge) if tip <= grip.traction_mps2 else (grip.traction_mps2, "traction")
        peaks.append(BodyPeak(what, max(0.0, float(np.max(finite))), name, limit))
    return tuple(peaks)


def _number(table: dict[str, object], key: str, default: float) -> float:
    value = table.get(key, default)
    return float(value) if isinstance(value, int | float) and not isinstance(value, bool) \
        and math.isfinite(value) else default


def _tuning(rec: Recording, tau_c_s: float | None, notes: list[str]) -> Tuning | None:
    """Wheel speed loop suggestions when the recording has open-loop wheel steps (the `identify` program); else
    None. Open loop means the profile's [units] unit is "duty": the command is then what the motor gets."""
    wheel_segments = [seg for seg in rec.segments if seg.segment.bypass and seg.segment.axis.is_wheel
                      and seg.segment.kind in (Kind.STEP, Kind.RAMP)]
    steps = [seg for seg in wheel_segments if seg.segment.kind is Kind.STEP and seg.start != seg.end]
    if not steps:
        return None
    units = _profile_table(rec, "units")
    full_duty = _number(units, "full_duty_radps", 0.0)
    if units.get("unit") != "duty" or full_duty <= 0.0:
        if rec.program == "identify":
            notes.append(f"no wheel speed loop suggestions: the run's [units] unit is {units.get('unit', 'unknown')!r}"
                         ', so the firmware closed its own loop; identify the motors open loop (unit = "duty")')
        return None
    t = rec.t
    commanded = np.abs(rec.data["left_cmd_radps"]) + np.abs(rec.data["right_cmd_radps"])
    moved = np.flatnonzero(commanded > 0.0)
    at_rest = t < (t[moved[0]] if moved.size else t[-1])
    period = 1.0 / _number(rec.bench or {}, "rate_hz", 1.0 / float(np.median(np.diff(t))))
    wheels = {}
    for wheel in ("left", "right"):
        scale = _number(units, f"trim_{wheel}", 1.0) / full_duty
        duty = rec.data[f"{wheel}_cmd_radps"] * scale
        rate = rec.data[f"{wheel}_meas_radps"]
        mine = [seg for seg in steps if seg.segment.axis.value == wheel]
        ramps = [("forwards" if seg.end > 0 else "backwards", seg.t_start_s, seg.t_end_s) for seg in wheel_segments
                 if seg.segment.axis.value == wheel and seg.segment.kind is Kind.RAMP and seg.start == 0.0
                 and seg.end != 0.0]
        if not mine:
            continue
        wheels[wheel] = tune_wheel(
            wheel, t, duty, rate,
            [DutyStep(seg.segment.index, seg.segment.name, seg.t_start_s + seg.segment.lead_s, seg.t_end_s,
                      seg.start * scale, seg.end * scale) for seg in mine],
            ramps, rest_band(rate[at_rest]), period, tau_c_s, scale)
    notes += [f"no {tuned.wheel} wheel loop gains: {'; '.join(tuned.problems)}" for tuned in wheels.values()
              if tuned.problems]
    return Tuning(wheels, period, tau_c_s, _number(units, "gear_ratio", 1.0), _number(units, "ticks_per_rev", 0.0))


def _profile(rec: Recording) -> dict[str, Any]:
    """The recorder sidecar's profile entry (path, name, data), {} when unknown."""
    try:
        meta = json.loads(sidecar_path(rec.path).read_text(encoding="utf-8"))
        profile = meta.get("profile") or {}
        return profile if isinstance(profile, dict) else {}
    except (OSError, ValueError, AttributeError, TypeError, RecursionError):
        return {}


def _profile_table(rec: Recording, name: str) -> dict[str, object]:
    """A table of the profile the recording was made with, from the recorder's sidecar ({} when unknown)."""
    try:
        return dict((_profile(rec).get("data") or {}).get(name) or {})
    except (AttributeError, TypeError, ValueError):
        return {}


# --- writing -----------------------------------------------------------------------------------------------------

def _decimate(t: np.ndarray, y: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """At most ~PLOT_POINTS points per line: the min and max of each bin, so spikes stay visible."""
    n = t.size
    if n <= PLOT_POINTS:
        return t, y
    size = int(math.ceil(n / (PLOT_POINTS // 2)))
    m = (n // size) * size
    tb = t[:m].reshape(-1, size)
    yb = np.nan_to_num(y[:m], nan=0.0).reshape(-1, size)
    lo, hi = yb.argmin(axis=1), yb.argmax(axis=1)
    first = np.minimum(lo, hi)
    second = np.maximum(lo, hi)
    rows = np.arange(tb.shape[0])
    ts = np.column_stack([tb[rows, first], tb[rows, second]]).ravel()
    ys = np.column_stack([yb[rows, first], yb[rows, second]]).ravel()
    return ts, ys


def _title(report: Report, what: str) -> str:
    """Every figure names what it shows, the recording and the robot: figures travel without their folder."""
    return f"{what}\n{Path(report.recording).name}" + (f"  ({report.robot})" if report.robot else "")


NOTE_LINES = 4     # notes printed under a figure; the rest are in summary.md


def _figure_notes(fig: Any, report: Report) -> float:
    """The report's notes (failed quality gates first) in red under the plots; returns the height they take."""
    if not report.notes:
        return 0.0
    shown = [textwrap.shorten(note, 150, placeholder=" ...") for note in report.notes[:NOTE_LINES]]
    if len(report.notes) > NOTE_LINES:
        shown.append(f"(+ {len(report.notes) - NOTE_LINES} more notes in summary.md)")
    height = (0.3 + 0.17 * len(shown)) / fig.get_figheight()
    fig.text(0.01, 0.01, "\n".join(shown), color="C3", fontsize=8, va="bottom", ha="left")
    return height


def _figures(rec: Recording, report: Report, out: Path) -> list[Path]:
    import matplotlib

    matplotlib.use("Agg")
    from matplotlib import pyplot as plt

    sig = _Signals(rec)
    t = rec.t
    axes_shown = [a for a in ("speed", "turn", "left", "right") if sig.axis(a) is not None]
    paths = []

    def mark(ax: Any, labelled: bool = False) -> None:
        """Segment boundaries as lines; on the top plot also labelled with the segment's number and name."""
        for seg in rec.segments[1:]:
            ax.axvline(seg.t_start_s, color="0.6", lw=0.6, ls="--", zorder=0)
        ax.grid(True, lw=0.3)
        if labelled and len(rec.segments) > 1:
            top = ax.secondary_xaxis("top")
            top.set_xticks([seg.t_start_s for seg in rec.segments],
                           labels=[f"{seg.segment.index} {seg.segment.name}" for seg in rec.segments], fontsize=7,
                           rotation=20, ha="left")
            top.tick_params(length=0)

    def finish(fig: Any, name: str, what: str) -> None:
        fig.suptitle(_title(report, what), fontsize=10)
        bottom = _figure_notes(fig, report)
        paths.append(_save(fig, out / name, bottom))

    fig, axs = plt.subplots(len(axes_shown), 1, figsize=(11, 2.3 * len(axes_shown) + 1), sharex=True,
                            squeeze=False)
    for i, (ax, name) in enumerate(zip(axs[:, 0], axes_shown)):
        req, cmd, meas = sig.series(name)
        for values, label, style in ((req, "request", ":"), (cmd, "command", "-"), (meas, "measured", "-")):
            ax.plot(*_decimate(t, values), style, lw=0.8, label=label)
        ax.set_ylabel(f"{name} ({UNITS[name]})")
        mark(ax, labelled=i == 0)
    axs[0, 0].legend(loc="upper right", fontsize=8)
    axs[-1, 0].set_xlabel("t (s)")
    finish(fig, FIGURES[0], "command vs response")

    fig, axs = plt.subplots(len(axes_shown), 1, figsize=(11, 2.3 * len(axes_shown) + 1), sharex=True,
                            squeeze=False)
    for i, (ax, name) in enumerate(zip(axs[:, 0], axes_shown)):
        for which, label in (("cmd", "commanded"), ("meas", "achieved")):
            ax.plot(*_decimate(t, sig.derivative(name, which, 1)), lw=0.8, label=label)
        ax.set_ylabel(f"d {name}/dt ({UNITS[name]}/s)")
        mark(ax, labelled=i == 0)
    axs[0, 0].legend(loc="upper right", fontsize=8)
    axs[-1, 0].set_xlabel("t (s)")
    finish(fig, FIGURES[1], "acceleration (Savitzky-Golay derivative)")

    fig, axs = plt.subplots(2, 1, figsize=(11, 5.6), sharex=True)
    if sig.body:
        _, cmd, meas = sig.series("speed")
        axs[0].plot(*_decimate(t, cmd - meas), lw=0.8, label="speed (m/s)")
        if report.limits is not None:
            error = report.limits.speed_error_mps
            for sign in (1, -1):
                axs[0].axhline(sign * error, color="C3", lw=0.6, ls="--",
                               label=f"stated tolerance \u00b1{error:.3g} m/s" if sign > 0 else None)
        axs[0].set_ylabel("command - measured")
        axs[0].legend(loc="upper right", fontsize=8)
    mark(axs[0], labelled=True)
    err_l, err_r = sig.cmd_l - sig.meas_l, sig.cmd_r - sig.meas_r
    axs[1].plot(*_decimate(t, err_l), lw=0.8, label="left")
    axs[1].plot(*_decimate(t, err_r), lw=0.8, label="right")
    axs[1].plot(*_decimate(t, err_l - err_r), lw=0.8, label="left - right")
    axs[1].set_ylabel("wheel error (rad/s)")
    axs[1].set_xlabel("t (s)")
    axs[1].legend(loc="upper right", fontsize=8)
    mark(axs[1])
    finish(fig, FIGURES[2], "tracking error")
    if report.tuning is not None and report.tuning.wheels:
        fig = _tuning_figure(plt, rec, report.tuning)
        finish(fig, TUNING_FIGURE, "open-loop steps and their first-order-plus-dead-time fits")
    plt.close("all")
    return paths


def _tuning_figure(plt: Any, rec: Recording, tuning: Tuning) -> Any:
    """Per wheel: the measured rate over its identification segments with each step's fitted model, the gains in the
    title, and a close-up of the first step between moving levels (the samples against the model)."""
    wheels = list(tuning.wheels.values())
    fig, axs = plt.subplots(len(wheels), 2, figsize=(12, 3.2 * len(wheels) + 1), squeeze=False,
                            gridspec_kw={"width_ratios": [3, 1]})
    t = rec.t
    for (ax, close), wheel in zip(axs, wheels):
        steps = [s for s in wheel.steps if s.fit is not None]
        if not steps:
            continue
        start = min(seg.t_start_s for seg in rec.segments if seg.segment.axis.value == wheel.wheel)
        rows = (t >= start) & (t <= steps[-1].step.t_end_s)
        rate = rec.data[f"{wheel.wheel}_meas_radps"]
        duty = rec.data[f"{wheel.wheel}_cmd_radps"] * wheel.duty_per_command
        ax.plot(t[rows], rate[rows], color="0.5", lw=0.8, label="measured")
        zoomed = False
        for i, step_fit in enumerate(steps):
            step, fit = step_fit.step, step_fit.fit
            assert fit is not None
            window = (t >= step.t_start_s - tuning_mod.STEP_LEAD_S) & (t < step.t_end_s)
            before = window & (t < step.t_start_s)
            level = float(np.mean(rate[before])) if np.any(before) else 0.0
            dt = float(np.median(np.diff(t[window])))
            model = level + analysis.simulate_fopdt(dt, duty[window] - step.duty_before, fit.gain, fit.tau_s,
                                                    fit.dead_time_s, 0.0)
            colour = "C3" if step_fit.problems else f"C{i % 3}"
            ax.plot(t[window], model, "--", lw=1.0, color=colour, label="fits (red: fails its gates)" if i == 0
                    else None)
            if step.linear and not zoomed:
                zoomed = True
                near = window & (t < step.t_start_s + 6 * fit.lag_s)
                close.plot(t[near], rate[near], "o", ms=3, color="0.4", label="measured")
                close.plot(t[near], model[near[window]], "--", color=colour, label="fit")
                close.axvline(step.t_start_s, color="0.6", lw=0.6, ls=":")
                close.set_title(f"{step.name}: tau {fit.tau_s * 1e3:.1f} ms, dead time {fit.dead_time_s * 1e3:.1f} "
                                "ms", fontsize=9)
                close.set_xlabel("t (s)")
                close.grid(True, lw=0.3)
                close.legend(loc="lower right", fontsize=8)
        gains = wheel.gains
        ax.set_title(f"{wheel.wheel}: " + (
            f"gain {wheel.gain:.4g} rad/s per duty, tau {(wheel.tau_s or 0) * 1e3:.1f} ms, dead time "
            f"{(wheel.dead_time_s or 0) * 1e3:.1f} ms; SIMC Kc {gains.kc:.4g} duty per rad/s, tau_I "
            f"{gains.tau_i_s * 1e3:.1f} ms (tau_c {gains.tau_c_s * 1e3:.1f} ms)" if gains is not None
            else "no gains: " + "; ".join(wheel.problems)[:140]), fontsize=9)
        ax.set_ylabel(f"{wheel.wheel} wheel (rad/s)")
        ax.set_xlabel("t (s)")
        ax.grid(True, lw=0.3)
        ax.legend(loc="upper right", fontsize=8)
    return fig


def _save(fig: Any, path: Path, bottom: float = 0.0) -> Path:
    fig.tight_layout(rect=(0.0, bottom, 1.0, 1.0))
    with atomic_output(path, binary=True) as handle:
        fig.savefig(handle, format="png", dpi=90)
    return path


def _fmt(value: float | None, digits: str = ".3g") -> str:
    return "-" if value is None else format(value, digits)


def markdown(report: Report) -> str:
    name = Path(report.recording).name
    lines = [f"# Bench report: {name}" + (f" ({report.robot})" if report.robot else ""), ""]
    lines.append(f"Program: {report.program or 'unknown'}; {report.rows} rows over {report.duration_s:.1f} s.")
    lines += ["", "## Notes", "", *[f"- {note}" for note in report.notes], ""] if report.notes else [""]
    lines += ["## Segments", "",
              "| # | segment | axis | dead time s | rise 10-90 % s | overshoot % | settling 2 % s | steady-state error"
              " | peak accel (cmd / achieved) | peak jerk (cmd / achieved) | tracking RMS | L-R mismatch RMS / peak"
              " rad/s |",
              "|---|---|---|---|---|---|---|---|---|---|---|---|"]
    for s in report.segments:
        m = s.step
        lines.append(
            f"| {s.index} | {s.name}{' (around the shaper)' if s.bypass else ''} | {s.axis} ({s.unit}) | "
            f"{_fmt(m.dead_time_s if m else None)} | {_fmt(m.rise_time_s if m else None)} | "
            f"{_fmt(m.overshoot_pct if m else None, '.1f')} | {_fmt(m.settling_time_s if m else None)} | "
            f"{_fmt(m.steady_state_error if m else None)} | {_fmt(s.peak_accel_cmd)} / {_fmt(s.peak_accel)} | "
            f"{_fmt(s.peak_jerk_cmd)} / {_fmt(s.peak_jerk)} | {_fmt(s.tracking_rms)} | "
            f"{_fmt(s.mismatch_rms_radps)} / {_fmt(s.mismatch_peak_radps)} |")
    lines += ["", "Step metrics are timed from the request step, relative to the response's own change; the "
              "settling band is 2 % of the change or 5 standard deviations of the noise at rest before the step, "
              "whichever is wider; "
              "peak accelerations and jerks are per second of the axis unit.", "",
              "## Wheel response (first order plus dead time)", "",
              "| wheel | gain | time constant s | dead time s | R^2 | NRMSE | quality gates |",
              "|---|---|---|---|---|---|---|"]
    for wheel, fit in report.fits.items():
        gates = "; ".join(report.fit_problems.get(wheel, ())) or "pass"
        if fit is None:
            lines.append(f"| {wheel} | - | - | - | - | - | {gates} |")
        else:
            lines.append(f"| {wheel} | {fit.gain:.3f} | {fit.tau_s:.4f} | {fit.dead_time_s:.4f} | {fit.r2:.4f} | "
                         f"{fit.nrmse:.4f} | {gates} |")
    lines += ["", f"Quality gates: R^2 >= {analysis.MIN_FIT_R2}, a positive gain, no parameter at its search bound, "
              f"at least {analysis.MIN_MOVING_SAMPLES} samples with the command moving. Limits are suggested only "
              "from fits that pass, on a robot whose polarity check (if the recording has one) found nothing."]
    if report.limits is not None:
        lines += ["", "## Suggested limits", "", "```toml", (report.limits_snippet() or "").rstrip(), "```"]
    else:
        lines += ["", "## Suggested limits", "", "None: see the notes at the top (polarity before limits)."]
    if report.polarity is not None:
        lines += ["", "## Polarity and encoder check", ""]
        lines += [f"- **{f.kind}**: {f.text}" for f in report.polarity.findings]
        snippet = report.polarity.snippet()
        if snippet:
            lines += ["", "Profile change:", "", "```toml", snippet.rstrip(), "```"]
        if report.polarity.candidates:
            lines += ["", "One of these profile changes, after the check that tells them apart (never more than one):",
                      "", "```toml", report.polarity.candidate_blocks().rstrip(), "```"]
    if report.tuning is not None:
        lines += ["", *tuning_markdown(report.tuning, Path(report.recording).name)]
    if report.body:
        lines += ["", "## Measured peaks against the body's static limits", ""]
        lines += [f"- {peak.text()}" for peak in report.body]
        lines += ["", f"The limits are from the profile's [body]: {BODY_CAUTION}"]
    lines += ["", "## Figures", ""]
    lines += [f"![{Path(f).stem}]({f})" for f in (*FIGURES, *((TUNING_FIGURE,) if report.tuning else ()))]
    return "\n".join(lines) + "\n"


def _ms(value: float | None) -> str:
    return "-" if value is None else f"{value * 1e3:.1f}"


def tuning_markdown(tuning: Tuning, source: str) -> list[str]:
    """The wheel speed loop section: feed-forward, break-away, step fits, SIMC gains, snippets (or why not)."""
    lines = ["## Wheel speed loop (open-loop identification)", "",
             "Feed-forward `duty = kS sign(w) + kV w + kA dw/dt` (least squares over "
             f"{tuning_mod.FF_WINDOW_S:g} s windows in which the wheel turns one way; w in wheel rad/s):", "",
             "| wheel | kS (duty) | kV (duty per rad/s) | kA (duty per rad/s^2) | R^2 | windows | break-away forwards /"
             " backwards (duty) | quality gates |", "|---|---|---|---|---|---|---|---|"]
    for wheel in tuning.wheels.values():
        ff = wheel.feedforward
        breaks = " / ".join(_fmt(wheel.break_away.get(way), ".4f") for way in ("forwards", "backwards"))
        gates = "; ".join(wheel.feedforward_problems) or "pass"
        if ff is None:
            lines.append(f"| {wheel.wheel} | - | - | - | - | - | {breaks} | {gates} |")
        else:
            lines.append(f"| {wheel.wheel} | {ff.static_duty:.4f} | {ff.duty_per_radps:.5f} | "
                         f"{ff.duty_per_radps2:.3g} | {ff.r_squared:.5f} | {ff.samples} | {breaks} | {gates} |")
    lines += ["", "First order plus dead time per step, in deviation from the level before it (\"linear\": between "
              "two levels turning the wheel the same way, where friction does not change; these give the model):",
              "", "| wheel | step | duty from -> to | linear | gain (rad/s per duty) | time constant ms | dead time ms "
              "| R^2 | quality gates |", "|---|---|---|---|---|---|---|---|---|"]
    for wheel in tuning.wheels.values():
        for step in wheel.steps:
            fit, st = step.fit, step.step
            gates = "; ".join(step.problems) or "pass"
            numbers = ("- | - | - | -" if fit is None else
                       f"{fit.gain:.4g} | {fit.tau_s * 1e3:.1f} | {fit.dead_time_s * 1e3:.1f} | {fit.r2:.4f}")
            lines.append(f"| {wheel.wheel} | {st.name} | {st.duty_before:+.3f} -> {st.duty_after:+.3f} | "
                         f"{'yes' if st.linear else 'no'} | {numbers} | {gates} |")
    lines += ["", "PI gains by the SIMC rules (S. Skogestad, \"Simple analytic rules for model reduction and PID "
              "controller tuning\", Journal of Process Control 13, 2003): Kc = tau / (k (tau_c + theta)), tau_I = "
              "min(tau, 4 (tau_c + theta)), tau_c = theta unless `--tau-c` sets it. The closed loop then follows about "
              "e^(-theta s) / (tau_c s + 1): 63 % of a step after theta + tau_c. Sampled: for a loop run once per "
              f"command period ({tuning.period_s * 1e3:g} ms), with half a period added to the dead time (the "
              "zero-order hold; common practice), Kp = Kc and Ki T = Kc T / tau_I.", "",
              "| wheel | model gain | tau ms | theta ms | tau_c ms | Kc (duty per rad/s) | tau_I ms | "
              "Ki (duty per rad) | 63 % after ms | sampled Kp | sampled Ki T |", "|---" * 11 + "|"]
    for wheel in tuning.wheels.values():
        g, d = wheel.gains, wheel.gains_sampled
        if g is None or d is None:
            lines.append(f"| {wheel.wheel} | {_fmt(wheel.gain, '.4g')} | {_ms(wheel.tau_s)} | "
                         f"{_ms(wheel.dead_time_s)} | no gains: {'; '.join(wheel.problems)} |||||||")
            continue
        kp, ki_t = d.per_period(tuning.period_s)
        lines.append(f"| {wheel.wheel} | {wheel.gain:.4g} | {_ms(wheel.tau_s)} | {_ms(wheel.dead_time_s)} | "
                     f"{_ms(g.tau_c_s)} | {g.kc:.4g} | {_ms(g.tau_i_s)} | {g.ki:.4g} | "
                     f"{_ms((wheel.dead_time_s or 0.0) + g.tau_c_s)} | {kp:.4g} | {ki_t:.4g} |")
    ready = tuning.ready
    if ready:
        lines += ["", "In the firmware's speed unit (the sampled gains; the feed-forward per unit too):", "",
                  "| wheel | speed unit | Kp (duty per unit) | Ki T (duty per unit) | kV (duty per unit) | "
                  "kA (duty per unit/s) |", "|---|---|---|---|---|---|"]
        for suggestion in ready:
            for name, _, per_radps in tuning.firmware_units():
                kp, ki_t = suggestion.sampled.in_unit(per_radps).per_period(tuning.period_s)
                lines.append(f"| {suggestion.wheel.wheel} | {name} | {kp:.4g} | {ki_t:.4g} | "
                             f"{suggestion.ff.duty_per_radps / per_radps:.4g} | "
                             f"{suggestion.ff.duty_per_radps2 / per_radps:.4g} |")
    snippet, header = tuning.sim_snippet(), tuning.c_header(source)
    if snippet and header:
        lines += ["", "To try them on the simulated robot first (`[sim]`, with the profile's motor constants):", "",
                  "```toml", snippet.rstrip(), "```", "",
                  f"For the firmware ({TUNING_HEADER}, also written beside this summary):", "",
                  "```c", header.rstrip(), "```"]
    else:
        lines += ["", "No gains: a fit they would rest on fails its quality gates (see the notes and the tables "
                  "above). Check polarity first (the `polarity` program), that the wheels are off the ground and "
                  "turn freely, that the profile's [units] unit is \"duty\" and full_duty_radps right, then run "
                  "`identify` again."]
    return lines


def write_report(rec: Recording, report: Report, out: Path) -> list[Path]:
    """summary.md, report.json and the figures (and wheel_loop.h when an identification run gives gains) into
    `out`, all of them or none.

    Everything is written first into a hidden folder inside `out` (each file whole, console/files.py); only when all
    are there are they renamed into place, so a failure on the way (a full disk, a signal) leaves no new file. A
    folder this call created is removed again when nothing could be written into it."""
    created = make_folders(out)
    staging: Path | None = None
    try:
        header = report.tuning.c_header(Path(report.recording).name) if report.tuning else None
        extra = ((TUNING_FIGURE,) if report.tuning else ()) + ((TUNING_HEADER,) if header else ())
        for name in (*FIGURES, "report.json", "summary.md", *extra):
            check_output(out / name)
        try:
            staging = Path(tempfile.mkdtemp(dir=out, prefix=".report-"))
        except OSError as error:
            raise OutputError(str(out), f"cannot be written ({reason(error)})") from None
        staged = _figures(rec, report, staging)
        texts = [("report.json", json.dumps(report.to_json(), indent=2) + "\n"), ("summary.md", markdown(report))]
        if header:
            texts.append((TUNING_HEADER, header))
        for name, text in texts:
            staged.append(write_atomic(staging / name, text))
        paths = []
        for path in staged:
            os.replace(path, out / path.name)
            paths.append(out / path.name)
    except BaseException as error:
        if staging is not None:
            shutil.rmtree(staging, ignore_errors=True)
        remove_folders(created)
        if isinstance(error, OSError):
            raise OutputError(str(out), f"cannot be written ({reason(error)})") from None
        raise
    staging.rmdir()     # empty: everything in it was renamed into place
    return paths
