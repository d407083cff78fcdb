"""A session recording (CSV + JSON sidecar, console/record.py) opened for replay: numpy columns, the events found in
them, and row i turned into the Snapshot the drive screen's panels read.

Reading is vectorized (an hour at 100 Hz is 360,000 rows): the columns the events and the position bar need are
converted for every row on opening, the others by blocks the first time a row of the block is shown (`Rows`);
seeking is a binary search on the time column, and a snapshot is built only for the row on screen.
What the rows do not hold is derived where the profile allows it and said where it does not:
- the envelope target: the profile's envelope applied to the recorded request (shaping), the same envelope the loop
  used when the profile is the one in the sidecar; `--profile` shows what another would do;
- the binding limit: recorded (the `bound` column, any limit the shaper named: envelope, held-back, acceleration,
  jerk); in older recordings the envelope applied to the request, which names only the envelope's limits;
- acceleration and jerk use: central differences of the recorded shaped output over the profile's ramp limits;
- the pose: the recorded true pose (simulated robot), else dead reckoning (shaping.odometry.arc_step) from the
  measured wheel rates;
- stop causes: recorded (the `cause` column); in older recordings the robot's flags at the stop where they name it
  (watchdog, fault, emergency stop), else "cause not recorded".
Older recordings (no flags, cause or bound columns), truncated ones (a killed run: no sidecar, maybe half a last
line) and ones without a sidecar open as far as they go; `missing` says what is not there. A file that is not a
recording is one `InputError` line (exit 2) naming the file, the field, the value and what is allowed.
"""

from __future__ import annotations

import io
import json
import math
import shlex
import warnings
from collections.abc import Callable
from dataclasses import dataclass
from pathlib import Path
from typing import Any

import numpy as np

from console.core.codec import DecoderCounts
from console.core.link import LinkStats
from console.core.safety import SafetyState, StopCause
from console.core.step import ENVELOPE_BOUNDS, LIMIT_EVENT_HOLD_S, Event, LoopStats, Snapshot
from console.errors import InputError
from console.files import read_input
from console.profile import Profile, ProfileError, load_profile, profile_from_data
from console.protocol import Flags, flag_names
from console.record import (
    BOUND_COLUMN,
    CAUSE_COLUMN,
    COLUMNS,
    FLAGS_COLUMN,
    FORMATS_READ,
    POSE_COLUMNS,
    RecordingError,
    name_first_bad_cell,
    sidecar_path,
)
from shaping.envelope import Bound
from shaping.odometry import arc_step
from shaping.shaper import Shaped

STATES = tuple(SafetyState)
"""State codes in the index: position in this tuple (the CSV spells them out)."""
FAULT_FLAGS = ((Flags.WATCHDOG, StopCause.WATCHDOG), (Flags.ESTOP, StopCause.ESTOP), (Flags.FAULT, StopCause.FAULT))
FAULT_MASK = int(Flags.WATCHDOG | Flags.ESTOP | Flags.FAULT)
BOUNDS = tuple(Bound)
NO_BOUND = len(BOUNDS)
"""Bound codes in the index: position in BOUNDS, NO_BOUND where no limit binds."""
LOGGED_BOUND_CODES = np.array([BOUNDS.index(bound) for bound in ENVELOPE_BOUNDS])
"""The limits the loop logs when they bind (console.core.step): the envelope's."""
CAUSES = tuple(StopCause)
NO_CAUSE = len(CAUSES)
"""Cause codes in the index: position in CAUSES, NO_CAUSE where no stop is in force."""
WORD_CODES: dict[str, dict[str, float]] = {
    "state": {state.value: float(code) for code, state in enumerate(STATES)},
    CAUSE_COLUMN: {"": float(NO_CAUSE), "nan": float(NO_CAUSE)} | {c.value: float(k) for k, c in enumerate(CAUSES)},
    BOUND_COLUMN: {"": float(NO_BOUND), "nan": float(NO_BOUND)} | {b.value: float(k) for k, b in enumerate(BOUNDS)},
}
"""The columns written as words, each word's code in the float table (an empty cell, read as nan or not: none)."""
EVENTS_SHOWN = 50
"""Events handed to the event log with each snapshot: the newest this many up to the row on screen."""
BLOCK_ROWS = 4096
"""Rows parsed together the first time one of them is shown (41 s at 100 Hz: a jump needs one or two blocks)."""
INDEX = ("t_s", "v_req_mps", "omega_req_radps", "state")
"""Columns parsed for every row on opening: the events, the position bar and the binding limit need them all (and
flags, cause and bound where recorded)."""
MEASURED = ("left_meas_radps", "right_meas_radps")
MOMENT_KINDS = ("stop", "fault")
"""What `notable_moments` lists (the report prints a replay command for each)."""
MOMENTS_LISTED = 20


@dataclass(frozen=True, slots=True)
class Mark:
    """An event of the recording with the row it happened at (navigation and the position bar)."""

    row: int
    event: Event


@dataclass(frozen=True, slots=True)
class Sidecar:
    """What the JSON sidecar says, where it says it (None: not there)."""

    link_url: str | None
    started_utc: str | None
    link: LinkStats | None            # at the end of the run
    loop: LoopStats | None            # at the end of the run
    dropped_rows: int | None
    write_error: str | None
    profile_data: dict[str, Any] | None
    profile_name: str | None


def _fail(where: Path | str, key: str, value: object, allowed: str) -> RecordingError:
    return RecordingError(str(where), key, value, allowed)


def _number_or_none(value: object) -> float | None:
    return float(value) if isinstance(value, int | float) and not isinstance(value, bool) else None


def _link_stats(data: object) -> LinkStats | None:
    if not isinstance(data, dict):
        return None
    try:
        decoder = data.get("decoder") or {}
        return LinkStats(str(data["url"]), float(data["rate_hz"]), _number_or_none(data.get("rtt_s")),
                         DecoderCounts(**{k: int(v) for k, v in decoder.items()}),
                         _number_or_none(data.get("telemetry_age_s")), int(data["frames_sent"]),
                         int(data["telemetry_received"]), int(data.get("telemetry_gaps", 0)), data.get("lost"))
    except (KeyError, TypeError, ValueError):
        return None     # a sidecar of another version: the end-of-run figures are left out, the rows still play


def _loop_stats(data: object) -> LoopStats | None:
    if not isinstance(data, dict):
        return None
    try:
        return LoopStats(float(data["period_s"]), int(data["cycles"]), int(data["overruns"]),
                         float(data["period_error_p50_s"]), float(data["period_error_p99_s"]),
                         float(data["period_error_max_s"]), float(data["work_p99_s"]))
    except (KeyError, TypeError, ValueError):
        return None


def read_sidecar(csv_path: Path) -> Sidecar | None:
    """The sidecar next to the recording, or None when there is none (a killed run writes none)."""
    path = sidecar_path(csv_path)
    if not path.exists():
        return None
    try:
        meta = json.loads(read_input(path, "a recording's JSON sidecar").decode("utf-8"))
    except (UnicodeDecodeError, ValueError, RecursionError) as error:
        raise _fail(path, "file", path.name, f"a JSON sidecar as diffdeck writes it ({error.__class__.__name__}); "
                                             "move it away to replay the CSV alone") from None
    if not isinstance(meta, dict) or meta.get("format") not in FORMATS_READ:
        shown = meta.get("format") if isinstance(meta, dict) else type(meta).__name__
        raise _fail(path, "format", shown, " or ".join(f'"{name}"' for name in FORMATS_READ)
                    + "; move the file away to replay the CSV alone")
    profile: dict[str, Any] = meta["profile"] if isinstance(meta.get("profile"), dict) else {}
    data = profile.get("data")
    dropped = meta.get("dropped_rows")
    return Sidecar(
        link_url=meta.get("link_url") if isinstance(meta.get("link_url"), str) else None,
        started_utc=meta.get("started_utc") if isinstance(meta.get("started_utc"), str) else None,
        link=_link_stats(meta.get("link")), loop=_loop_stats(meta.get("loop")),
        dropped_rows=dropped if isinstance(dropped, int) else None,
        write_error=meta.get("write_error") if isinstance(meta.get("write_error"), str) else None,
        profile_data=data if isinstance(data, dict) else None,
        profile_name=profile.get("name") if isinstance(profile.get("name"), str) else None,
    )


def _columns(path: Path, header: str) -> list[str]:
    columns = [name.strip() for name in header.split(",")]
    lacking = [name for name in COLUMNS if name not in columns]
    if lacking:
        raise _fail(path, "header", header[:80], "a diffdeck recording: a CSV whose header has the columns "
                                                 + ",".join(COLUMNS) + " (then x_m,y_m,heading_rad, flags, cause "
                                                 "and bound where recorded)")
    return columns


def _word_tail(columns: list[str]) -> int:
    """How many of the last columns hold words (cause and bound in recordings that have them; 0 in older ones)."""
    return next((n for n, name in enumerate(reversed(columns)) if name not in WORD_CODES), len(columns))


def _empty_numbers(body: bytes, tail: int) -> tuple[int, int] | None:
    """Where the first and the last empty number cell are (the positions of their ",,"), None when there is none.
    The last `tail` columns hold words (cause, bound) that are empty in nearly every row: their empty cells are left
    out, found with numpy rather than one by one (an hour has hundreds of thousands of them)."""
    if tail < 2:                    # an empty word cell can only be the last one: every ",," is an empty number
        first = body.find(b",,")
        return None if first < 0 else (first, body.rfind(b",,"))
    buf = np.frombuffer(body, dtype=np.uint8)
    commas = np.flatnonzero(buf == 44)
    k = np.flatnonzero(np.diff(commas) == 1) + 1        # index in `commas` of each ",,"'s second comma
    if not k.size:
        return None
    ends = np.flatnonzero(buf == 10)
    line_end = np.append(ends, buf.size)[np.searchsorted(ends, commas[k])]
    later = np.minimum(k + tail - 1, commas.size - 1)    # a number has at least tail - 1 commas after it in its line
    hits = commas[k][(k + tail - 1 < commas.size) & (commas[later] < line_end)]
    return (int(hits[0]) - 1, int(hits[-1]) - 1) if hits.size else None


def _filled(body: bytes, tail: int = 0) -> bytes:
    """Empty number cells (nothing measured yet) as nan. They sit in the first rows, before the first telemetry:
    only the stretch of lines that has any is rewritten, not the whole hour. The last `tail` columns are words read
    by converters that take an empty cell (or "nan") as none."""
    span = _empty_numbers(body, tail)
    if span is not None:
        start = body.rfind(b"\n", 0, span[0]) + 1
        end = body.find(b"\n", span[1]) + 1 or len(body)
        stretch = body[start:end]
        for _ in range(2):          # two passes: each one fills every other empty cell of a run of them
            stretch = stretch.replace(b",,", b",nan,")
        body = body[:start] + stretch + body[end:]
    if not tail and b",\n" in body:     # an empty last cell (older recordings end with the pose)
        body = body.replace(b",\n", b",nan\n")
    return body


def _parse_rows(path: Path, body: bytes, columns: list[str], names: tuple[str, ...] | None = None,
                first_line: int = 2) -> np.ndarray:
    """The rows' columns `names` (all by default) as one float table (words as their codes in WORD_CODES, empty
    cells as nan); the first bad cell named otherwise (`first_line`: the file's line number of the first row in
    `body`)."""
    names = tuple(columns) if names is None else names
    use = [columns.index(name) for name in names]
    converters: dict[int | str, Callable[[str], float]] = {
        columns.index(name): WORD_CODES[name].__getitem__ for name in names if name in WORD_CODES}
    try:
        with warnings.catch_warnings():
            warnings.simplefilter("ignore")    # an empty body is said by the caller, in one line
            table = np.loadtxt(io.BytesIO(_filled(body, _word_tail(columns))), delimiter=",", ndmin=2, dtype=float,
                               encoding="utf-8",
                               usecols=use, converters=converters or None)
    except (ValueError, KeyError, UnicodeDecodeError):
        table = None
    if table is None or (table.size and table.shape[1] != len(use)) or np.isinf(table).any():
        name_first_bad_cell(path, body, columns, first_line=first_line, words=WORD_CODES)
    assert table is not None
    return table


class Rows:
    """A recording's rows: the index columns (time, state, flags, request; the measured rates too where the pose
    must be dead-reckoned) parsed for every row at once, the others by blocks of BLOCK_ROWS the first time a row of
    the block is shown. Converting text to numbers is most of the cost of opening an hour: this way the first frame
    waits for a third of it, and a jump for a block or two. A bad cell in a block is found when the block is
    first shown (RecordingError, one line)."""

    def __init__(self, path: Path, columns: list[str], body: bytes, index: tuple[str, ...]) -> None:
        self.path, self.columns, self._body = path, columns, body
        ends = np.flatnonzero(np.frombuffer(body, dtype=np.uint8) == 10)
        self._starts = np.concatenate([[0], ends + 1])
        self.count = int(ends.size)
        table = _parse_rows(path, body, columns, index)
        if table.shape[0] != self.count:       # loadtxt skips blank lines: say where the first one is
            line = int(np.searchsorted(ends, body.find(b"\n\n"))) + 3
            raise _fail(path, f"line {line}", "empty", "a row on every line")
        self.index = index
        self.cols = {name: np.full(self.count, np.nan) for name in columns}
        for k, name in enumerate(index):
            self.cols[name] = table[:, k].copy()
        self._lazy = tuple(name for name in columns if name not in index)
        self._parsed = np.zeros((self.count + BLOCK_ROWS - 1) // BLOCK_ROWS, dtype=bool)
        if not self._lazy:
            self._parsed[:] = True

    def ensure(self, first: int, last: int) -> None:
        """Rows first..last (inclusive) have every column."""
        for block in range(max(first, 0) // BLOCK_ROWS, min(last, self.count - 1) // BLOCK_ROWS + 1):
            if not self._parsed[block]:
                a, z = block * BLOCK_ROWS, min((block + 1) * BLOCK_ROWS, self.count)
                chunk = self._body[self._starts[a]:self._starts[z]]
                table = _parse_rows(self.path, chunk, self.columns, self._lazy, first_line=a + 2)
                for k, name in enumerate(self._lazy):
                    self.cols[name][a:z] = table[:, k]
                self._parsed[block] = True

    def column(self, name: str, first: int, last: int) -> np.ndarray:
        """Rows first..last (inclusive) of one column."""
        self.ensure(first, last)
        return self.cols[name][first:last + 1]


def _profile(path: Path, sidecar: Sidecar | None, override: str | Path | None) -> Profile:
    if override is not None:
        return load_profile(override)
    side = sidecar_path(path)
    if sidecar is None:
        raise _fail(side, "file", "missing", "the sidecar the recorder writes at the end of a run (a killed run has "
                                             "none); give the robot profile with --profile PROFILE")
    if sidecar.profile_data is None:
        raise _fail(side, "profile", "missing", "the profile the recording was made with; give it with --profile")
    try:
        return profile_from_data(side, sidecar.profile_data)
    except ProfileError as error:
        raise ProfileError(error.where, f"profile.data.{error.key}", error.value,
                           error.allowed + " (or give a profile with --profile)") from None


def _cause(flags: np.ndarray | None, causes: np.ndarray | None, row: int) -> StopCause | None:
    """The stop cause at a row: recorded (the cause column), else what the robot's fault flags at that row name;
    None when neither tells."""
    if causes is not None:
        code = int(causes[row])
        return None if code == NO_CAUSE else CAUSES[code]
    if flags is None:
        return None
    return next((cause for flag, cause in FAULT_FLAGS if int(flags[row]) & flag), None)


def _share(used: float) -> float:
    """A share of a limit for the panel's bar: 0 to 1 (0 where it cannot be worked out)."""
    return min(used, 1.0) if math.isfinite(used) else 0.0


def _held_changes(t: np.ndarray, codes: np.ndarray) -> list[tuple[int, int]]:
    """(row, code) where `codes` changes to a value that then holds LIMIT_EVENT_HOLD_S or longer (a brief brush is
    no change), the loop's rule for logging a limit: a row at least that long after the change still has it. The
    first row counts from no limit."""
    starts = np.concatenate([[0], np.flatnonzero(codes[1:] != codes[:-1]) + 1])
    lasts_t = t[np.append(starts[1:] - 1, t.size - 1)]        # the time of each run's last row
    last = NO_BOUND
    changes = []
    for start, last_t in zip(starts.tolist(), lasts_t.tolist()):
        code = int(codes[start])
        if code != last and last_t - t[start] >= LIMIT_EVENT_HOLD_S:
            last = code
            changes.append((start, code))
    return changes


def _order(mark: Mark) -> tuple[int, bool]:
    """Events by row; at one row a fault before the stop it brought."""
    return mark.row, mark.event.kind != "fault"


def row_events(t: np.ndarray, state: np.ndarray, flags: np.ndarray | None,
               causes: np.ndarray | None = None) -> list[Mark]:
    """What the state, flags and cause columns tell by themselves (no profile needed): arming, stops with their
    cause (recorded, else the one the flags give), a harsher stop replacing the one in force, coming to rest, the
    robot's faults raised and cleared."""
    marks: list[Mark] = []
    stopping, stopped, armed = (STATES.index(s) for s in (SafetyState.STOPPING, SafetyState.STOPPED,
                                                           SafetyState.ARMED))
    if t.size and state[0] != STATES.index(SafetyState.DISARMED):
        marks.append(Mark(0, Event(float(t[0]), f"the recording begins {STATES[state[0]].value}", "safety")))
    for i in (np.flatnonzero(state[1:] != state[:-1]) + 1).tolist():
        new, old = int(state[i]), int(state[i - 1])
        if new == stopping or (new == stopped and old != stopping):
            cause = _cause(flags, causes, i)
            why = cause.value if cause is not None else "cause not recorded"
            text = f"stop ({why})" + ("; stopped at once" if new == stopped else "; ramping down")
            marks.append(Mark(i, Event(float(t[i]), text, "stop")))
        elif new == stopped:
            marks.append(Mark(i, Event(float(t[i]), "at rest: stopped", "safety")))
        elif new == armed:
            marks.append(Mark(i, Event(float(t[i]), "armed", "safety")))
        else:
            marks.append(Mark(i, Event(float(t[i]), STATES[new].value, "safety")))
    if causes is not None:      # a harsher stop while stopping or stopped: same state, another cause
        held = (state[1:] == state[:-1]) & np.isin(state[1:], (stopping, stopped))
        for i in (np.flatnonzero(held & (causes[1:] != causes[:-1]) & (causes[1:] != NO_CAUSE)) + 1).tolist():
            marks.append(Mark(i, Event(float(t[i]), f"stop ({CAUSES[int(causes[i])].value}); replaces the stop in "
                                                    "force", "stop")))
    if flags is not None:
        faults = flags & FAULT_MASK
        if t.size and faults[0]:
            marks.append(Mark(0, Event(float(t[0]), "the robot reports " + ", ".join(flag_names(int(faults[0]))),
                                       "fault")))
        for i in (np.flatnonzero(faults[1:] != faults[:-1]) + 1).tolist():
            raised = int(faults[i] & ~faults[i - 1])
            if raised:
                marks.append(Mark(i, Event(float(t[i]), "the robot reports " + ", ".join(flag_names(raised)),
                                           "fault")))
            else:
                marks.append(Mark(i, Event(float(t[i]), "the robot clears " + ", ".join(
                    flag_names(int(faults[i - 1]))), "safety")))
    return marks


class Replay:
    """A recording ready to be shown row by row. Build it with `open_replay`."""

    def __init__(self, path: Path, profile: Profile, profile_source: str, rows: Rows, sidecar: Sidecar | None,
                 missing: list[str]) -> None:
        self.path = path
        self.name = path.name
        self.profile = profile
        self.profile_source = profile_source
        self.sidecar = sidecar
        self.url = (sidecar.link_url if sidecar is not None and sidecar.link_url else "not recorded")
        self.source = rows
        cols = rows.cols
        self.t = cols["t_s"]
        self.rows = rows.count
        self.period_s = 1.0 / profile.link.rate_hz
        self.state = cols["state"].astype(np.int8)
        self.flags = cols[FLAGS_COLUMN].astype(np.int64) if FLAGS_COLUMN in cols else None
        self.causes = cols[CAUSE_COLUMN].astype(np.int8) if CAUSE_COLUMN in cols else None
        self.target_v, self.target_w, derived = self._envelope(profile.envelope)
        self.bound_recorded = BOUND_COLUMN in cols
        self.bound = cols[BOUND_COLUMN].astype(np.int8) if self.bound_recorded else derived
        self.true_pose = all(name in cols for name in POSE_COLUMNS)
        if not self.true_pose:
            self._reckoned = self._dead_reckoning()
            missing.append("no true pose recorded: the top view shows dead reckoning from the measured wheel rates")
        self.missing = tuple(missing)
        self.marks = self._find_events()
        self.mark_rows = np.array([m.row for m in self.marks], dtype=np.int64)
        self._kind_rows = {kind: np.array([m.row for m in self.marks if m.event.kind == kind], dtype=np.int64)
                           for kind in ("stop", "fault", "limit", "safety", "record")}
        if self.bound_recorded:     # every limit the shaper named is a change to jump to, the ramp limits too
            self._kind_rows["limit"] = np.array([row for row, _ in _held_changes(self.t, self.bound)], dtype=np.int64)

    @property
    def start_s(self) -> float:
        return float(self.t[0])

    @property
    def end_s(self) -> float:
        return float(self.t[-1])

    # -- derived columns --------------------------------------------------------------------------------------------

    def _envelope(self, envelope: Any) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
        """Target and binding limit per row: the envelope applied once per distinct request (a request holds for many
        rows: keys, trace rows, program segments), then spread back over the rows it holds for."""
        req = np.column_stack([self.source.cols["v_req_mps"], self.source.cols["omega_req_radps"]])
        req = np.where(np.isfinite(req), req, 0.0)    # a rejected (non-finite) request is not recorded as a number
        starts = np.flatnonzero(np.concatenate([[True], np.any(req[1:] != req[:-1], axis=1)]))
        pairs, inverse = np.unique(req[starts], axis=0, return_inverse=True)
        clamped = [envelope.clamp(float(v), float(w)) for v, w in pairs.tolist()]
        target = np.array([(c.v_mps, c.omega_radps) for c in clamped]).reshape(-1, 2)
        codes = np.array([NO_BOUND if c.bound is None else BOUNDS.index(c.bound) for c in clamped], dtype=np.int8)
        per_row = np.repeat(inverse.reshape(-1), np.diff(np.append(starts, self.rows)))
        return target[per_row, 0], target[per_row, 1], codes[per_row]

    def _ramp_use(self, row: int) -> tuple[float, float]:
        """Share of the acceleration and jerk limits the recorded output used at `row`: central differences over
        the rows around it (clipped to 1; 0 where there are too few rows)."""
        first, last = max(row - 2, 0), min(row + 2, self.rows - 1)
        if last - first < 2:
            return 0.0, 0.0
        limits = self.profile.limits
        t = self.t[first:last + 1]
        v, w = (self.source.column(name, first, last) for name in ("v_mps", "omega_radps"))
        a, alpha = np.gradient(v, t), np.gradient(w, t)
        k = row - first
        speeding_up = a[k] * v[k] > 0.0
        accel = max(abs(a[k]) / (limits.accel_mps2 if speeding_up else limits.decel_mps2),
                    abs(alpha[k]) / limits.turn_accel_radps2)
        jerk = max(abs(np.gradient(a, t)[k]) / limits.jerk_mps3,
                   abs(np.gradient(alpha, t)[k]) / limits.turn_jerk_radps3)
        return _share(float(accel)), _share(float(jerk))

    def measured_body(self, first: int, last: int) -> tuple[np.ndarray, np.ndarray]:
        """Body speed and turn rate from the measured wheel rates, rows first..last (nan before any telemetry)."""
        left, right = (self.source.column(name, first, last) for name in MEASURED)
        body = self.profile.geometry.to_body(left, right)   # type: ignore[arg-type]  # arithmetic: element-wise
        return np.asarray(body[0], dtype=float), np.asarray(body[1], dtype=float)

    def poses(self, first: int, last: int) -> np.ndarray:
        """The pose (x, y, heading) of rows first..last: recorded, or dead-reckoned (nan before any measurement)."""
        if self.true_pose:
            return np.column_stack([self.source.column(name, first, last) for name in POSE_COLUMNS])
        return self._reckoned[first:last + 1]

    def _dead_reckoning(self) -> np.ndarray:
        """Pose per row from the measured wheel rates, arc by arc, from (0, 0, 0) at the first measurement."""
        pose = np.full((self.rows, 3), np.nan)
        dt = np.diff(self.t, prepend=self.t[0])
        x = y = heading = 0.0
        started = False
        meas_v, meas_w = self.measured_body(0, self.rows - 1)
        for i, (v, w, step) in enumerate(zip(meas_v.tolist(), meas_w.tolist(), dt.tolist())):
            if math.isnan(v) or math.isnan(w):
                if not started:
                    continue
            else:
                if started:
                    x, y, heading = arc_step(x, y, heading, v, w, step)
                started = True
            pose[i] = (x, y, heading)
        return pose

    # -- events ----------------------------------------------------------------------------------------------------

    def _find_events(self) -> tuple[Mark, ...]:
        t = self.t
        marks = [Mark(0, Event(float(t[0]), f"in this recording: {note}", "record")) for note in self.missing]
        marks += row_events(t, self.state, self.flags, self.causes)
        marks += self._limit_changes()
        end = self.rows - 1
        if self.sidecar is not None and self.sidecar.write_error:
            marks.append(Mark(end, Event(self.end_s, self.sidecar.write_error, "record")))
        if self.sidecar is not None and self.sidecar.dropped_rows:
            marks.append(Mark(end, Event(self.end_s, f"{self.sidecar.dropped_rows} rows dropped by the recorder "
                                                     "(gaps in time)", "record")))
        return tuple(sorted(marks, key=_order))

    def _limit_changes(self) -> list[Mark]:
        """The binding-limit events as the loop logs them: an envelope limit (the ramp limits bind in every
        transition: the loop shows them live, never logs them) once it has held for LIMIT_EVENT_HOLD_S, at the row
        where it began."""
        logged = np.where(np.isin(self.bound, LOGGED_BOUND_CODES), self.bound, NO_BOUND)
        return [Mark(row, Event(float(self.t[row]), f"limit: {BOUNDS[code].value} clips the request"
                                if code != NO_BOUND else "limit: request within the envelope", "limit"))
                for row, code in _held_changes(self.t, logged)]

    def cause_at(self, row: int) -> StopCause | None:
        return _cause(self.flags, self.causes, row)

    # -- navigation ------------------------------------------------------------------------------------------------

    def row_at(self, t_s: float) -> int:
        """The row in force at time t_s: the last one at or before it (the first row before the recording starts)."""
        return max(int(np.searchsorted(self.t, t_s + 1e-9, side="right")) - 1, 0)

    def next_mark(self, row: int, kind: str | None = None, *, back: bool = False) -> int | None:
        """The row of the next (or previous) event after `row`, of `kind` or any; None when there is none."""
        rows = self.mark_rows if kind is None else self._kind_rows[kind]
        if back:
            i = int(np.searchsorted(rows, row, side="left")) - 1
            return int(rows[i]) if i >= 0 else None
        i = int(np.searchsorted(rows, row, side="right"))
        return int(rows[i]) if i < rows.size else None

    def kind_rows(self, kind: str) -> np.ndarray:
        return self._kind_rows[kind]

    # -- what the screen shows -------------------------------------------------------------------------------------

    def events_to(self, row: int) -> tuple[Event, ...]:
        """The newest EVENTS_SHOWN events at or before `row`."""
        end = int(np.searchsorted(self.mark_rows, row, side="right"))
        return tuple(m.event for m in self.marks[max(0, end - EVENTS_SHOWN):end])

    def snapshot(self, row: int) -> Snapshot:
        """Row `row` as the loop's snapshot would have shown it (what was not recorded: see the module docstring)."""
        i = row
        self.source.ensure(i - 2, i + 2)
        c = self.source.cols

        def value_at(name: str, row: int) -> float:
            return float(c[name][row])

        def value(name: str) -> float:
            return value_at(name, i)

        def measured(name: str) -> float | None:
            v = float(c[name][i])
            return None if math.isnan(v) else v

        bound = int(self.bound[i])
        state = STATES[int(self.state[i])]
        v, w = value("v_mps"), value("omega_radps")
        v_req, w_req = value("v_req_mps"), value("omega_req_radps")
        target_v, target_w = float(self.target_v[i]), float(self.target_w[i])
        left, right = value("left_cmd_radps"), value("right_cmd_radps")
        accel_use, jerk_use = self._ramp_use(i)
        shaped = Shaped(v_req, w_req, target_v, target_w, v, w, 0.0, 0.0, 0.0, 0.0, left, right,
                        None if bound == NO_BOUND else BOUNDS[bound], accel_use, jerk_use,
                        not (math.isfinite(v_req) and math.isfinite(w_req)), None, False,
                        i > 0 and v == value_at("v_mps", i - 1) and w == value_at("omega_radps", i - 1))
        cause = None
        if self.causes is not None:
            cause = self.cause_at(i)           # what the loop's snapshot held at this row
        elif state in (SafetyState.STOPPING, SafetyState.STOPPED):
            start = self.next_mark(i + 1, "stop", back=True)
            cause = self.cause_at(start) if start is not None else None
        pose = self.poses(i, i)[0]
        cmd = self.profile.units.to_motor(left, right)
        return Snapshot(float(self.t[i]), state, cause, shaped, cmd[0], cmd[1], measured("left_meas_radps"),
                        measured("right_meas_radps"), None, int(self.flags[i]) if self.flags is not None else 0,
                        None if math.isnan(pose[0]) else (float(pose[0]), float(pose[1]), float(pose[2])),
                        self._link_at(i), self._loop_stats(), self.events_to(i), 0, "replay: nothing can be armed")

    def _link_at(self, row: int) -> LinkStats:
        """The link as far as the rows tell it: the rows per second over the last second; the decoder counters are
        the sidecar's for the whole run (the rows do not hold them), frame counts and ages are not recorded."""
        t = self.t
        first = int(np.searchsorted(t, t[row] - 1.0, side="left"))
        span = float(t[row] - t[first])
        rate = (row - first) / span if span > 0.0 else 0.0
        end = self.sidecar.link if self.sidecar is not None else None
        decoder = end.decoder if end is not None else DecoderCounts(0, 0, 0, 0, 0)
        return LinkStats(self.url, rate, None, decoder, None, 0, 0)

    def _loop_stats(self) -> LoopStats:
        if self.sidecar is not None and self.sidecar.loop is not None:
            return self.sidecar.loop
        return LoopStats(self.period_s, self.rows, 0, 0.0, 0.0, 0.0, 0.0)


def read_rows(path: str | Path, *, measured: bool = False) -> tuple[Rows, list[str]]:
    """A recording's rows (the index columns parsed, state as its code in STATES, flags as integers, cause and bound
    as their codes in CAUSES and BOUNDS where recorded; `measured` or no pose columns: the measured rates too) and
    what the file lacks; RecordingError (one line, exit code 2) for anything that is not a recording."""
    path = Path(path)
    raw = read_input(path, "a CSV recording")
    head, _, body = raw.partition(b"\n")
    del raw
    try:
        header = head.decode("utf-8").strip()
    except UnicodeDecodeError:
        raise _fail(path, "header", head[:40], "a diffdeck recording (UTF-8 CSV text)") from None
    columns = _columns(path, header)
    missing: list[str] = []
    if body and not body.endswith(b"\n"):           # a killed run: the last line may be half written
        body = body[: body.rfind(b"\n") + 1]
        missing.append("the last line was cut off (a killed run?): it is left out")
    if not body.strip():
        raise _fail(path, "rows", 0, "at least one whole data row after the header (nothing was recorded)")
    index = INDEX + tuple(name for name in (FLAGS_COLUMN, CAUSE_COLUMN, BOUND_COLUMN) if name in columns)
    if measured or not all(name in columns for name in POSE_COLUMNS):
        index += MEASURED
    rows = Rows(path, columns, body, index)
    t = rows.cols["t_s"]
    bad = np.flatnonzero(~np.isfinite(t) | (np.diff(t, prepend=-np.inf) <= 0.0))
    if bad.size:
        raise _fail(path, f"line {int(bad[0]) + 2}, t_s", float(t[bad[0]]), "finite times, strictly increasing")
    if FLAGS_COLUMN in columns:
        rows.cols[FLAGS_COLUMN] = np.nan_to_num(rows.cols[FLAGS_COLUMN])
    else:
        missing.append("no flags column (a recording from an older version): robot faults and flags are not shown")
    if CAUSE_COLUMN not in columns:
        missing.append("no cause column (a recording from an older version): a stop's cause is shown only where the "
                       "robot's flags name it")
    if BOUND_COLUMN not in columns:
        missing.append("no bound column (a recording from an older version): the binding limit is the profile's "
                       "envelope applied to the request (acceleration, jerk and held-back limits are not shown)")
    return rows, missing


def open_replay(path: str | Path, profile: str | Path | None = None) -> Replay:
    """Read, check and index a recording; the profile comes from the sidecar unless `profile` (a TOML path) is
    given. Raises RecordingError / ProfileError (one line, exit code 2)."""
    path = Path(path)
    rows, missing = read_rows(path)
    sidecar = read_sidecar(path)
    chosen = _profile(path, sidecar, profile)
    if sidecar is None:
        missing.append("no sidecar (a killed run?): no link url, loop figures or end-of-run counters")
    if profile is not None:
        source = f"--profile {profile}"
    else:
        source = f"the sidecar ({sidecar.profile_name or chosen.name})" if sidecar is not None else ""
    link = sidecar.link if sidecar is not None else None
    if (link is not None and link.telemetry_received == 0) or (
            MEASURED[0] in rows.index and not np.isfinite(rows.cols[MEASURED[0]]).any()):
        missing.append("no measured wheel rates (no telemetry was received)")
    gaps = int(np.count_nonzero(np.diff(rows.cols["t_s"]) > 1.5 / chosen.link.rate_hz))
    if gaps:
        missing.append(f"{gaps} gaps in time longer than 1.5 periods (rows dropped, or another loop rate)")
    return Replay(path, chosen, source, rows, sidecar, missing)


def replay_command(path: str | Path, t_s: float) -> str:
    """The command that opens `path` at time t_s (rounded up to the millisecond, so it lands on that row)."""
    at = math.ceil(t_s * 1000.0 - 1e-6) / 1000.0
    return f"diffdeck replay {shlex.quote(str(path))} --at {at:.3f}"


def notable_moments(path: str | Path) -> list[tuple[float, str, str]]:
    """(time, what, replay command) for the stops and faults of a recording, the first MOMENTS_LISTED of them, for
    `report` to print. Needs no profile; a file replay cannot read has none (the report says its own line)."""
    try:
        rows, _ = read_rows(path)
    except InputError:
        return []
    cols = rows.cols
    flags = cols[FLAGS_COLUMN].astype(np.int64) if FLAGS_COLUMN in cols else None
    causes = cols[CAUSE_COLUMN].astype(np.int8) if CAUSE_COLUMN in cols else None
    marks = sorted(row_events(cols["t_s"], cols["state"].astype(np.int8), flags, causes), key=_order)
    return [(m.event.t_s, m.event.text, replay_command(path, m.event.t_s))
            for m in marks if m.event.kind in MOMENT_KINDS][:MOMENTS_LISTED]
