"""`diffdeck shape PROFILE REQUESTS.csv`: offline preview of what the shaper makes of a request trace.

Lets a person see, before any motor turns, which limit binds when and what the wheels will be asked to do. The
trace is read and checked completely before anything is written, and `-o` is written to a temporary file that is
renamed into place only when complete, so a bad row never leaves a half-written output behind.
"""

from __future__ import annotations

import argparse
import math
from dataclasses import dataclass
from pathlib import Path
from typing import IO

from console.errors import DiffdeckError, InputError
from console.files import STDOUT, atomic_output, check_output, plain_number, read_csv_rows
from console.profile import RATE_HZ_RANGE, Profile, load_profile
from shaping.envelope import Bound
from shaping.ramp import plan_ramp
from shaping.shaper import Mode, Shaper, speed_limits, turn_limits

NAME = "shape"
HELP = "shape a request trace offline and write what the wheels would be commanded"
ORDER = 20

INPUT_HEADER = ("t_s", "v_mps", "omega_radps")
OUTPUT_HEADER = ("t_s", "v_req_mps", "omega_req_radps", "v_mps", "omega_radps", "a_mps2", "alpha_radps2",
                 "left_radps", "right_radps", "bound")
DEFAULT_RATE_HZ = 100.0
TIME_EPS_S = 1e-9  # a request at t is in force from the sample at t, whatever the rounding of k / rate
BOUND_TEXT: dict[Bound | None, str] = {None: "", **{bound: bound.value for bound in Bound}}
# One %-format per row is several times faster than csv.writer on floats, and 10 significant digits (far below a
# micrometre per second) read better than 17. Bound names hold no comma or quote, so no CSV quoting is needed.
ROW_FORMAT = "%.10g," * (len(OUTPUT_HEADER) - 1) + "%s\n"
MAX_DURATION_S = 24 * 3600.0  # a day of shaping is 8.6 million rows at 100 Hz: anything longer is a mistake


@dataclass(frozen=True, slots=True)
class Requests:
    """A validated trace: strictly increasing times, finite requests."""

    t_s: list[float]
    v_mps: list[float]
    omega_radps: list[float]


def add_arguments(parser: argparse.ArgumentParser) -> None:
    parser.add_argument("profile", metavar="PROFILE", help="robot profile (TOML)")
    parser.add_argument("requests", metavar="REQUESTS.csv",
                        help="request trace, header t_s,v_mps,omega_radps; each row held until the next row's time")
    parser.add_argument("-o", "--output", metavar="OUT.csv", help="write here instead of standard output")
    parser.add_argument("--rate-hz", type=float, default=DEFAULT_RATE_HZ,
                        help=f"shaping rate (default {DEFAULT_RATE_HZ:g} Hz)")
    parser.add_argument("--mode", choices=[mode.value for mode in Mode], default=Mode.SYNCED.value,
                        help="synced: both axes arrive together, curvature kept (default); independent: each axis "
                             "time-optimal")
    parser.add_argument("--until-s", type=float, metavar="T",
                        help="sample up to T seconds instead of until the last request has settled")


def read_requests(path: str | Path) -> Requests:
    """Read and check a request trace; InputError names the file, line, field, value and what is allowed."""
    file = str(path)
    times: list[float] = []
    speeds: list[float] = []
    turns: list[float] = []
    previous = -math.inf
    for where, row in read_csv_rows(path, "a request trace (CSV)", INPUT_HEADER):
        t, v, omega = (plain_number(where, name, text) for name, text in zip(INPUT_HEADER, row))
        if t < 0.0 or t <= previous:
            allowed = "at least 0" if previous == -math.inf else f"greater than the previous row's {previous:g}"
            raise InputError(where, "t_s", row[0], f"a time in s {allowed} (times must increase)")
        if t > MAX_DURATION_S:
            rows = t * DEFAULT_RATE_HZ
            raise InputError(where, "t_s", row[0][:40], f"at most {MAX_DURATION_S:g} s (24 h): shaping up to it "
                             f"at {DEFAULT_RATE_HZ:g} Hz would write {rows:.3g} rows, about {_size_text(rows)}")
        previous = t
        times.append(t)
        speeds.append(v)
        turns.append(omega)
    if not times:
        raise InputError(file, "rows", "(none)", "at least one request row after the header")
    return Requests(times, speeds, turns)


def _settle_allowance_s(profile: Profile) -> float:
    """Generous upper bound on the time from the last request to settling.

    After the last request the shaper finishes at most the plan in force, one re-plan made while moving and two
    straight legs from rest (see shaping.shaper.Shaper): four plans, each no longer than a full reversal on both
    axes, slowed at most by the share of the wheels' acceleration budget each axis may get. Only a fault in the
    shaper could exceed it; it stops the preview from running forever.
    """
    envelope, limits, geometry = profile.envelope, profile.limits, profile.geometry
    speed = plan_ramp(-envelope.top_reverse_speed_mps, 0.0, envelope.top_speed_mps, speed_limits(limits)).duration
    turn_rate = envelope.top_turn_rate_radps
    turn = plan_ramp(-turn_rate, 0.0, turn_rate, turn_limits(limits)).duration
    share = 1.0
    if limits.wheel_accel_radps2 is not None:
        need = max(limits.accel_mps2, limits.decel_mps2) + limits.turn_accel_radps2 * geometry.track_width_m / 2
        share = min(1.0, limits.wheel_accel_radps2 * geometry.wheel_radius_m / need)
    return 4.0 * (speed + turn) / share + 1.0


def shape(profile: Profile, requests: Requests, out: IO[str], *, rate_hz: float = DEFAULT_RATE_HZ,
          mode: Mode = Mode.SYNCED, until_s: float | None = None) -> int:
    """Write one CSV row per period from t = 1 / rate_hz; returns the number of cycles.

    The sample at time t = k / rate_hz feeds the request in force at t to `Shaper.step(period)`, exactly as the
    control loop does each cycle. The loop is kept to the step call and one write: a one-hour trace at 100 Hz is
    360,000 cycles.
    """
    period = 1.0 / rate_hz
    step = Shaper(profile.geometry, profile.limits, mode).step
    out.write(",".join(OUTPUT_HEADER) + "\n")
    write = out.write
    row = ROW_FORMAT
    bound_text = BOUND_TEXT
    times, speeds, turns = requests.t_s, requests.v_mps, requests.omega_radps
    count = len(times)
    last_t = times[-1]
    end_s = until_s if until_s is not None else last_t + _settle_allowance_s(profile)
    index, next_t = 0, times[0]
    v_req = omega_req = 0.0
    k = 0
    while True:
        k += 1
        t = k / rate_hz
        while next_t <= t + TIME_EPS_S:
            v_req, omega_req = speeds[index], turns[index]
            index += 1
            next_t = times[index] if index < count else math.inf
        s = step(period, v_req, omega_req)
        write(row % (t, s.v_req_mps, s.omega_req_radps, s.v_mps, s.omega_radps, s.a_mps2, s.alpha_radps2,
                     s.left_radps, s.right_radps, bound_text[s.bound]))
        if t >= end_s - TIME_EPS_S:
            if until_s is None:
                raise DiffdeckError(f"shape: the output had not settled {end_s - last_t:.1f} s after the last "
                                    "request; this is a fault in the shaper, please report it")
            return k
        if until_s is None and index == count and s.settled:
            return k


def _check_options(args: argparse.Namespace) -> None:
    low, high = RATE_HZ_RANGE
    if not (math.isfinite(args.rate_hz) and low <= args.rate_hz <= high):
        raise InputError("command line", "--rate-hz", args.rate_hz, f"a number from {low:g} to {high:g} (Hz)")
    if args.until_s is not None and not (math.isfinite(args.until_s) and 0.0 < args.until_s <= MAX_DURATION_S):
        rows = args.until_s * args.rate_hz if math.isfinite(args.until_s) and args.until_s > 0.0 else None
        size = f"; this one would write {rows:.3g} rows, about {_size_text(rows)}" if rows else ""
        raise InputError("command line", "--until-s", args.until_s,
                         f"a time greater than 0 and at most {MAX_DURATION_S:g} s (24 h){size}")
    if args.output is not None and args.output != STDOUT:
        check_output(args.output)


def _size_text(rows: float) -> str:
    """Roughly how much text `rows` output rows take (a row with typical ten-digit figures)."""
    sample = ROW_FORMAT % (12345.67, 1.5, -0.25, 1.234567891, -0.2345678912, 0.1234567891, -1.234567891e-05,
                           12.34567891, 13.45678912, "wheel accel")
    size = rows * len(sample)
    for unit in ("bytes", "kB", "MB", "GB", "TB", "PB"):
        if size < 1000.0 or unit == "PB":
            break
        size /= 1000.0
    return f"{size:.3g} {unit}"


def _check_settle_bound(profile: Profile, requests: Requests, rate_hz: float) -> None:
    """Without --until-s the output runs until it settles; a profile whose ramps take hours (0.001 m/s^2 to reach
    100 m/s) could then run past the day's bound after the last request: refused up front, saying why."""
    end_s = requests.t_s[-1] + _settle_allowance_s(profile)
    if end_s > MAX_DURATION_S:
        rows = end_s * rate_hz
        raise InputError(str(profile.path), "limits", f"{_settle_allowance_s(profile):.4g} s to settle",
                         f"the output ends by {MAX_DURATION_S:g} s (24 h), but with these limits it may run to "
                         f"{end_s:.4g} s ({rows:.3g} rows, about {_size_text(rows)}); give --until-s T")


def run(args: argparse.Namespace) -> int:
    _check_options(args)
    profile = load_profile(args.profile)
    requests = read_requests(args.requests)
    if args.until_s is None:
        _check_settle_bound(profile, requests, args.rate_hz)
    options = {"rate_hz": args.rate_hz, "mode": Mode(args.mode), "until_s": args.until_s}
    with atomic_output(args.output or STDOUT) as handle:
        shape(profile, requests, handle, **options)
    return 0
