"""Polarity and encoder check: which wheel answers each command channel, in which direction, and how strongly.

The `polarity` program pulses each wheel forwards and backwards in turn. For every commanded channel this compares the
measured wheel rates (telemetry) and the true wheel motion: on the simulated robot recovered from the true pose
(a left-only wheel motion moves the robot by s_left / 2 and turns it by -s_left / W), on hardware as the operator saw
it (typed after the run, kept in the bench sidecar). Telemetry alone cannot tell a reversed motor from a reversed
encoder (both make the measured sign wrong) nor see a side mounted mirrored (both flip together): without an
observation the check says what to watch for instead of guessing.
"""

from __future__ import annotations

import json
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np

from console.bench.recording import Recording
from console.files import write_atomic

WHEELS = ("left", "right")
DEAD_SHARE = 0.2          # a channel moving no wheel by more than 20 % of the command is dead
SCALE_TOLERANCE = 0.1     # measured / commanded magnitude outside 1 +- 10 %: a unit or scale problem
TRIM_RANGE = (0.5, 1.5)   # what [units] trim_left / trim_right accept
STEADY_SHARE = 0.5        # the last half of a pulse is its steady part


@dataclass(frozen=True, slots=True)
class Finding:
    kind: str                 # "ok", "dead", "swapped", "inverted motor", "reversed encoder", "mirrored side", "scale"
    text: str
    fix: dict[str, object] = field(default_factory=dict)   # [units] keys -> new values


@dataclass(frozen=True, slots=True)
class PolarityReport:
    measured: tuple[tuple[float, float], tuple[float, float]]    # [commanded channel][wheel] measured / commanded
    physical: tuple[tuple[float, float], tuple[float, float]] | None   # same from the true pose (sim only)
    findings: tuple[Finding, ...]

    @property
    def fix(self) -> dict[str, object]:
        merged: dict[str, object] = {}
        for finding in self.findings:
            merged.update(finding.fix)
        return merged

    def snippet(self) -> str:
        if not self.fix:
            return ""
        lines = ["# proposed by the diffdeck polarity check", "[units]"]
        for key, value in self.fix.items():
            lines.append(f"{key} = {str(value).lower() if isinstance(value, bool) else format(value, '.4g')}")
        return "\n".join(lines) + "\n"


def _pulses(rec: Recording) -> dict[str, list[tuple[float, float, float]]]:
    """Pulses per channel: a wheel-axis step from rest followed by a hold at rest (t_start, t_end, t_rest_end)."""
    pulses: dict[str, list[tuple[float, float, float]]] = {"left": [], "right": []}
    segments = rec.segments
    for seg, after in zip(segments, segments[1:]):
        if seg.axis in WHEELS and seg.kind == "step" and seg.start == 0.0 and seg.end != 0.0 \
                and after.kind == "hold" and after.start == 0.0:
            pulses[seg.axis].append((seg.t_start_s, seg.t_end_s, after.t_end_s))
    return pulses


def _wheel_travel(rec: Recording, t0: float, t1: float) -> tuple[float, float] | None:
    """True wheel path lengths (left, right) in m between t0 and t1 from the true pose (nominal track width)."""
    if not rec.has_pose or rec.track_width_m is None:
        return None
    t = rec.t
    rows = (t >= t0) & (t <= t1)
    if np.count_nonzero(rows) < 2:
        return None
    x, y, h = rec.data["x_m"][rows], rec.data["y_m"][rows], rec.data["heading_rad"][rows]
    forward = float(np.sum(np.diff(x) * np.cos(h[:-1]) + np.diff(y) * np.sin(h[:-1])))
    turn = float(h[-1] - h[0])
    half = 0.5 * rec.track_width_m
    return forward - turn * half, forward + turn * half


OBSERVATIONS = ("left forwards", "left backwards", "right forwards", "right backwards", "none")
"""What the operator may have seen in a channel's 'forwards' pulse: which wheel turned, which way."""


def has_pulses(rec: Recording) -> bool:
    """The recording holds the pulses of a polarity program on both channels."""
    pulses = _pulses(rec)
    return bool(pulses["left"] and pulses["right"])


def observed_response(observed: dict[str, str]) -> tuple[tuple[float, float], tuple[float, float]] | None:
    """The operator's observations as a response matrix ([channel][wheel]: +1 forwards, -1 backwards, 0 still)."""
    rows = []
    for channel in WHEELS:
        answer = observed.get(channel)
        if answer not in OBSERVATIONS:
            return None
        row = [0.0, 0.0]
        if answer != "none":
            wheel, way = answer.split()
            row[WHEELS.index(wheel)] = 1.0 if way == "forwards" else -1.0
        rows.append((row[0], row[1]))
    return rows[0], rows[1]


def record_observations(bench_sidecar: Path, observed: dict[str, str]) -> None:
    """Add the operator's observations to a run's bench sidecar (rewritten atomically) for the report."""
    meta = json.loads(bench_sidecar.read_text(encoding="utf-8"))
    meta["observed"] = observed
    write_atomic(bench_sidecar, json.dumps(meta, indent=2) + "\n")


def check_polarity(rec: Recording, units: dict[str, object] | None = None) -> PolarityReport | None:
    """Diagnose from a recording of the polarity program; `units` is the profile's [units] table (current values)."""
    pulses = _pulses(rec)
    if not pulses["left"] or not pulses["right"]:
        return None
    units = units or {}
    t = rec.t
    cmd = {w: rec.data[f"{w}_cmd_radps"] for w in WHEELS}
    meas = {w: rec.data[f"{w}_meas_radps"] for w in WHEELS}
    dt = float(np.median(np.diff(t)))
    measured: list[tuple[float, float]] = []
    radius = rec.wheel_radius_m
    physical: list[tuple[float, float]] | None = [] if rec.has_pose and radius else None
    for channel in WHEELS:
        ratios, phys = [], []
        for t0, t1, t_after in pulses[channel]:
            steady = (t >= t1 - STEADY_SHARE * (t1 - t0)) & (t < t1)
            command = float(np.nanmean(cmd[channel][steady]))
            ratios.append([float(np.nanmean(meas[w][steady])) / command for w in WHEELS])
            if physical is not None and radius:
                # until the wheels have stopped again: the pulse plus the pause after it
                window = (t >= t0) & (t <= t_after)
                commanded_angle = float(np.sum(cmd[channel][window]) * dt)
                travel = _wheel_travel(rec, t0, t_after)
                if travel is not None:
                    phys.append([s / radius / commanded_angle for s in travel])
        measured.append(_pair(np.mean(ratios, axis=0)))
        if physical is not None:
            physical.append(_pair(np.mean(phys, axis=0)))
    m = (measured[0], measured[1])
    p = (physical[0], physical[1]) if physical is not None else None
    if p is None and rec.bench is not None and isinstance(rec.bench.get("observed"), dict):
        p = observed_response(rec.bench["observed"])      # hardware: what the operator saw
    return PolarityReport(m, p, tuple(_diagnose(m, p, units)))


def _pair(values: np.ndarray) -> tuple[float, float]:
    return float(values[0]), float(values[1])


def _flip(units: dict[str, object], key: str) -> dict[str, object]:
    return {key: not bool(units.get(key, False))}


def _diagnose(m: tuple, p: tuple | None, units: dict[str, object]) -> list[Finding]:
    findings: list[Finding] = []
    # Which wheel moves for each channel: physically if we can see it, else by telemetry.
    response = p if p is not None else m
    moved: dict[str, str | None] = {}
    for c, channel in enumerate(WHEELS):
        strength = [abs(response[c][w]) for w in range(2)]
        if max(strength) < DEAD_SHARE and max(abs(v) for v in m[c]) < DEAD_SHARE:
            moved[channel] = None
            findings.append(Finding("dead", f"the {channel} command moves no wheel (measured "
                                    f"{m[c][0]:+.2f} / {m[c][1]:+.2f} of the command): check that motor, its driver "
                                    "and wiring; no profile setting fixes a dead wheel"))
        else:
            moved[channel] = WHEELS[int(np.argmax(strength))]
    live = [c for c in WHEELS if moved[c] is not None]
    motor_swapped = any(moved[c] != c for c in live)
    if motor_swapped:
        if p is not None:
            findings.append(Finding("swapped", "the left command drives the right wheel and vice versa: the motor "
                                    "channels are swapped", _flip(units, "swap_motors")))
        else:
            findings.append(Finding("swapped", "the left command shows on the right encoder and vice versa: either the "
                                    "motor or the encoder channels are swapped; watch which wheel turns in the "
                                    "'left forwards' pulse: the right one -> swap_motors, the left one -> "
                                    "swap_encoders", _flip(units, "swap_motors")))
    # Encoder channel: which measurement answers the wheel that moved.
    for c, channel in enumerate(WHEELS):
        wheel = moved[channel]
        if wheel is None:
            continue
        w = WHEELS.index(wheel)
        measured_at = WHEELS[int(np.argmax([abs(m[c][0]), abs(m[c][1])]))]
        if p is not None and measured_at != wheel and not any(f.kind == "swapped enc" for f in findings):
            findings.append(Finding("swapped enc", "the encoder channels are swapped (each wheel reports on the other "
                                    "channel)", _flip(units, "swap_encoders")))
        meas_value = m[c][WHEELS.index(measured_at)]
        side = wheel
        if p is not None:
            phys_sign = np.sign(p[c][w])
            meas_sign = np.sign(meas_value)
            if phys_sign < 0 and meas_sign < 0:
                findings.append(Finding("inverted motor", f"the {side} motor turns the wrong way (its encoder reports "
                                        "that truly)", {**_flip(units, f"invert_{side}"),
                                                        **_flip(units, f"invert_{side}_encoder")}))
            elif phys_sign > 0 > meas_sign:
                findings.append(Finding("reversed encoder", f"the {side} wheel turns the right way but its encoder "
                                        "counts backwards", _flip(units, f"invert_{side}_encoder")))
            elif phys_sign < 0 < meas_sign:
                findings.append(Finding("mirrored side", f"the {side} side is mounted mirrored: it turns backwards "
                                        "and its encoder agrees", _flip(units, f"invert_{side}")))
        elif meas_value < 0:
            findings.append(Finding("inverted motor", f"the {side} wheel measures the opposite sign of its command: "
                                    f"a reversed motor or a reversed encoder. If the wheel turned BACKWARDS in the "
                                    f"'{channel} forwards' pulse set invert_{side} and invert_{side}_encoder; if it "
                                    f"turned forwards, only invert_{side}_encoder",
                                    {**_flip(units, f"invert_{side}"), **_flip(units, f"invert_{side}_encoder")}))
        magnitude = abs(meas_value)          # the steady measured rate: cleaner than the integrated pose
        if abs(magnitude - 1.0) > SCALE_TOLERANCE:
            key = f"trim_{channel}"
            trim = float(str(units.get(key, 1.0))) / magnitude
            hint = ""
            if not TRIM_RANGE[0] <= trim <= TRIM_RANGE[1]:
                hint = " (beyond what a trim may correct: check [units] unit, gear_ratio, ticks_per_rev)"
            findings.append(Finding("scale", f"the {channel} channel moves its wheel at {magnitude:.3g} x the "
                                    f"command: a unit or scale mismatch{hint}", {key: round(trim, 4)} if not hint
                                    else {}))
    if not findings:
        findings.append(Finding("ok", "both wheels answer their own command, in the right direction, at the right "
                                "rate" + ("" if p is not None else " (by telemetry: also check that the wheels turned "
                                                                   "forwards in the 'forwards' pulses)")))
    return findings
