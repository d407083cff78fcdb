"""Polarity and encoder check: which wheel answers each command channel, in which direction, and how strongly.

The `polarity` program pulses each wheel forwards and backwards in turn. For every commanded channel this compares the
measured wheel rates (telemetry) and the true wheel motion: on the simulated robot recovered from the true pose
(a left-only wheel motion moves the robot by s_left / 2 and turns it by -s_left / W), on hardware as the operator saw
it (typed after the run, kept in the bench sidecar). Telemetry alone cannot tell a reversed motor from a reversed
encoder (both make the measured sign wrong) nor see a side mounted mirrored (both flip together): without an
observation the check says what to watch for instead of guessing.
"""

from __future__ import annotations

import itertools
import json
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np

from console.bench.program import Kind
from console.bench.recording import Recording
from console.files import write_atomic
from shaping.units import WheelUnits

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
class Candidate:
    """One wiring that explains the telemetry, what a hand turn of the wheels shows if it is the true one, its fix."""

    wiring: str
    hand_turn: dict[str, tuple[str, int]]   # wheel turned forwards by hand -> (measured rate that moves, +1 / -1)
    check: str
    fix: dict[str, object]


@dataclass(frozen=True, slots=True)
class PolarityReport:
    measured: tuple[tuple[float, float], tuple[float, float]]    # [commanded channel][wheel] measured / commanded
    physical: tuple[tuple[float, float], tuple[float, float]] | None   # same from the true pose (sim only)
    findings: tuple[Finding, ...]
    candidates: tuple[Candidate, ...] = ()   # telemetry alone, several wirings fit: one block each, none to paste

    def candidate_blocks(self) -> str:
        """Each candidate's [units] block under the hand-turn result that identifies it (empty: not ambiguous)."""
        blocks = []
        for c in self.candidates:
            lines = [f"# if {c.check}: {c.wiring}", "[units]"]
            lines += [f"{key} = {str(value).lower()}" for key, value in c.fix.items()] or ["# no change"]
            blocks.append("\n".join(lines) + "\n")
        return "\n".join(blocks)

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
        if seg.segment.axis.is_wheel and seg.segment.kind is Kind.STEP and seg.start == 0.0 and seg.end != 0.0 \
                and after.segment.kind is Kind.HOLD and after.start == 0.0:
            pulses[seg.segment.axis.value].append((seg.t_start_s, seg.t_end_s, after.t_end_s))
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
    if p is None and _telemetry_is_a_wiring(m):
        candidates, wheels = _candidates(m, units)
        if len(candidates) > 1:
            text = (f"{len(candidates)} wirings explain this run equally well and the telemetry cannot tell them "
                    "apart, so there is no single change to paste. With the robot disarmed, turn the "
                    f"{' wheel, then the '.join(wheels)} wheel{',' if len(wheels) > 1 else ''}"
                    " forwards by hand, watch the measured wheel rates and use the block below that matches (or "
                    "run `bench ... polarity` on hardware and answer which wheel turned)")
            scale = [f for f in _diagnose(m, p, units) if f.kind == "scale"]
            return PolarityReport(m, p, (Finding("ambiguous", text), *scale), candidates)
    return PolarityReport(m, p, tuple(_diagnose(m, p, units)))


def _pair(values: np.ndarray) -> tuple[float, float]:
    return float(values[0]), float(values[1])


def _flip(units: dict[str, object], key: str) -> dict[str, object]:
    return {key: not bool(units.get(key, False))}


WIRING_KEYS = ("swap_motors", "invert_left", "invert_right", "swap_encoders", "invert_left_encoder",
               "invert_right_encoder")


def _matrices(keys: dict[str, bool]) -> tuple[np.ndarray, np.ndarray]:
    """The console's wheel -> firmware command matrix and firmware measurement -> wheel matrix for these keys,
    taken from shaping.units itself (so the candidates use exactly the corrections the loop applies)."""
    units = WheelUnits(invert_left=keys["invert_left"], invert_right=keys["invert_right"],
                       invert_left_encoder=keys["invert_left_encoder"],
                       invert_right_encoder=keys["invert_right_encoder"], swap_motors=keys["swap_motors"],
                       swap_encoders=keys["swap_encoders"])
    command = np.column_stack([units.to_motor(1.0, 0.0), units.to_motor(0.0, 1.0)])
    measure = np.column_stack([units.measured_from_motor(1.0, 0.0), units.measured_from_motor(0.0, 1.0)])
    return np.sign(command), np.sign(measure)


SIGNED_PERMUTATIONS = [np.diag(signs) @ perm for perm in (np.eye(2), np.eye(2)[::-1])
                       for signs in itertools.product((1.0, -1.0), repeat=2)]


def _faults(x: np.ndarray) -> int:
    """Wiring faults in a signed permutation: a swap counts one, each reversed wire one."""
    return int(x[0, 0] == 0.0) + int(np.count_nonzero(x < 0.0))


def _describe(motors: np.ndarray, encoders: np.ndarray) -> str:
    """Words for a wiring: motors[wheel, channel] (firmware command -> wheel), encoders[channel, wheel]."""
    parts = []
    if motors[0, 0] == 0.0:
        parts.append("the motor channels are swapped")
    parts += [f"the {WHEELS[w]} motor turns backwards" for w in range(2) if np.min(motors[w]) < 0.0]
    if encoders[0, 0] == 0.0:
        parts.append("the encoder channels are swapped")
    parts += [f"the {WHEELS[w]} encoder counts backwards" for w in range(2) if np.min(encoders[:, w]) < 0.0]
    return ", ".join(parts) or "correct"


def _candidates(m: tuple, units: dict[str, object]) -> tuple[tuple[Candidate, ...], tuple[str, ...]]:
    """Every wiring with the fewest faults that explains the telemetry m, with the hand turn that identifies it.

    Telemetry only shows the product of two wirings: the console's command -> wheel (a) and wheel -> console's
    measurement (b = t a^-1). Turning a wheel by hand, with no motor power, shows b alone, so it tells the
    candidates apart: the left wheel alone when that suffices, else both.
    """
    current = {key: bool(units.get(key, False)) for key in WIRING_KEYS}
    command, measure = _matrices(current)
    # t[wheel, channel]: the sign on the wheel each channel shows on most (crosstalk on the other is ignored)
    strongest = [int(np.argmax([abs(v) for v in m[c]])) for c in range(2)]
    t = np.array([[np.sign(m[c][w]) if w == strongest[c] else 0.0 for c in range(2)] for w in range(2)])
    found = []
    for a in SIGNED_PERMUTATIONS:
        b = t @ a.T                                   # a^-1 = a^T for a signed permutation
        motors, encoders = a @ command.T, measure.T @ b      # firmware-level wiring (command, measure: orthogonal)
        found.append((_faults(motors) + _faults(encoders), motors, encoders, b))
    fewest = min(f[0] for f in found)
    found = [f for f in found if f[0] == fewest]
    table = {tuple(bool(v) for v in combo): _matrices(dict(zip(WIRING_KEYS, combo)))
             for combo in itertools.product((False, True), repeat=len(WIRING_KEYS))}
    left_alone = len({(tuple(f[3][:, 0])) for f in found}) == len(found)
    shown = ("left",) if left_alone else WHEELS
    out = []
    for _, motors, encoders, b in found:
        # the keys whose corrections undo this wiring: command' = motors^-1, measure' = encoders^-1
        keys = next(combo for combo, (c, r) in table.items()
                    if np.array_equal(motors @ c, np.eye(2)) and np.array_equal(r @ encoders, np.eye(2)))
        fix: dict[str, object] = {key: value for key, value in zip(WIRING_KEYS, keys) if value != current[key]}
        hand = {WHEELS[w]: (WHEELS[int(np.argmax(np.abs(b[:, w])))], int(np.sum(b[:, w]))) for w in range(2)}
        check = " and ".join(f"turning the {wheel} wheel forwards by hand makes the measured {hand[wheel][0]} rate "
                             f"{'rise' if hand[wheel][1] > 0 else 'fall'}" for wheel in shown)
        out.append(Candidate(_describe(motors, encoders), hand, check, fix))
    return tuple(out), shown


def _telemetry_is_a_wiring(m: tuple) -> bool:
    """Each channel shows on one wheel, a different one each, clearly: a wiring, not a dead wheel or a unit fault."""
    strongest = [int(np.argmax([abs(v) for v in m[c]])) for c in range(2)]
    return (strongest[0] != strongest[1] and all(abs(m[c][strongest[c]]) >= DEAD_SHARE for c in range(2))
            and not all(strongest[c] == c and m[c][c] > 0 for c in range(2)))


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
