"""Session recording: one CSV row per control cycle plus a JSON sidecar saying how the numbers were made.

The control loop must never wait on the disk, so `put` only appends to a bounded in-memory queue (a full queue drops the
row and counts it) and a writer thread drains it. The writer writes whole lines in one system call at least every
`flush_s` (0.1 s by default): a process killed outright leaves a parseable file missing at most the last 0.2 s.
The sidecar (`<csv>.json`) is written on `close`, atomically, with the profile used, versions, link, start time,
loop statistics and the dropped-row count. On a full disk recording stops: the file is cut back to its last whole
row, the loop runs on (the robot is stopped as usual) and the sidecar says why; `problem` is the one line to show.
"""

from __future__ import annotations

import dataclasses
import json
import math
import platform
import threading
from collections import deque
from collections.abc import Collection, Iterable, Mapping, Sequence
from datetime import UTC, datetime
from pathlib import Path
from typing import TYPE_CHECKING, Any, NoReturn

import numpy
import serial

from console import __version__
from console.errors import InputError, OutputError
from console.files import PLAIN_NUMBER, check_stream_target, make_folders, reason, remove_folders, write_atomic
from console.links import is_simulated

if TYPE_CHECKING:
    from console.profile import Profile

COLUMNS = ("t_s", "v_req_mps", "omega_req_radps", "v_mps", "omega_radps", "left_cmd_radps", "right_cmd_radps",
           "left_meas_radps", "right_meas_radps", "state")
POSE_COLUMNS = ("x_m", "y_m", "heading_rad")
FLAGS_COLUMN = "flags"
"""The robot's telemetry flags as an integer (bits of console.protocol.Flags; 0 before any telemetry)."""
CAUSE_COLUMN = "cause"
"""The stop cause in force (the snapshot's StopCause value, e.g. "UI stall"); empty while there is none."""
BOUND_COLUMN = "bound"
"""The limit binding the shaper's output (Shaped.bound's value, as the shaping panel shows it); empty when none."""
TEXT_COLUMNS = ("state", CAUSE_COLUMN, BOUND_COLUMN)
"""Columns written as words; every other column is a number."""
FORMAT = "diffdeck recording 2"
"""2: `cause` and `bound` follow `flags`. Readers take 1 too (without those columns)."""
FORMATS_READ = ("diffdeck recording 1", FORMAT)
RECORDINGS_DIR = Path("recordings")


class RecordingError(InputError):
    """A file that is not a usable recording: file, field, value, what is allowed (exit code 2)."""


def name_first_bad_cell(path: Path, body: bytes, columns: Sequence[str], *, first_line: int = 2,
                        checked: Iterable[int] | None = None,
                        words: Mapping[str, Collection[str]] | None = None) -> NoReturn:
    """Raise the RecordingError naming the first bad line, field and value of a CSV body: the slow way, used only
    once a fast reader (numpy) has refused it. `checked`: the column indexes to look at (all by default); `words`:
    the allowed words of the text columns; every other checked cell is a plain number or empty."""
    words = words or {}
    indexes = list(range(len(columns)) if checked is None else checked)
    for number, raw in enumerate(body.split(b"\n"), start=first_line):
        if not raw.strip():
            continue
        fields = raw.decode("utf-8", "replace").rstrip("\r").split(",")
        if len(fields) != len(columns):
            raise RecordingError(str(path), f"line {number}", f"{len(fields)} fields",
                                 f"{len(columns)} comma-separated fields, as in the header")
        for index in indexes:
            name, cell = columns[index], fields[index]
            allowed_words = words.get(name)
            if allowed_words is not None:
                if cell not in allowed_words:
                    allowed = sorted(word for word in allowed_words if word and word != "nan")
                    raise RecordingError(str(path), f"line {number}, {name}", cell[:40],
                                         ("empty or " if "" in allowed_words else "") + "one of " + ", ".join(allowed))
            elif cell.strip() not in ("", "nan") and not PLAIN_NUMBER.fullmatch(cell):
                raise RecordingError(str(path), f"line {number}, {name}", cell[:40],
                                     "a finite number, or empty (or nan) where nothing was measured")
    raise RecordingError(str(path), "file", str(path),
                         "a CSV recording numpy can read (this one it cannot; please report it)")


def default_path(profile: Profile, now: datetime | None = None) -> Path:
    """`recordings/<profile file name>-<UTC timestamp>.csv`, never an existing file."""
    stamp = (now or datetime.now(UTC)).strftime("%Y%m%dT%H%M%SZ")
    path = RECORDINGS_DIR / f"{profile.path.stem}-{stamp}.csv"
    n = 1
    while path.exists() or path.with_name(path.name + ".json").exists():
        n += 1
        path = RECORDINGS_DIR / f"{profile.path.stem}-{stamp}-{n}.csv"
    return path


def sidecar_path(csv_path: str | Path) -> Path:
    csv_path = Path(csv_path)
    return csv_path.with_name(csv_path.name + ".json")


def _cell(value: object) -> str:
    if value is None:
        return ""
    if isinstance(value, float):
        return repr(value)
    return str(value)


def _json_safe(value: Any) -> Any:
    """Profile data may hold TOML dates or non-finite floats; JSON has neither."""
    if isinstance(value, dict):
        return {str(k): _json_safe(v) for k, v in value.items()}
    if isinstance(value, list | tuple):
        return [_json_safe(v) for v in value]
    if isinstance(value, float) and not math.isfinite(value):
        return str(value)
    if isinstance(value, bool | int | float | str) or value is None:
        return value
    if dataclasses.is_dataclass(value) and not isinstance(value, type):
        return _json_safe({f.name: getattr(value, f.name) for f in dataclasses.fields(value)})
    if hasattr(value, "value") and isinstance(value.value, str | int):   # enums
        return value.value
    return str(value)


class Recorder:
    """CSV rows from the loop (via `put`), written by a thread; `close(loop_stats)` finishes the file and the sidecar.

    `pose` adds the true pose columns; by default it is on exactly for the in-process simulated robot (url "sim").
    """

    def __init__(self, path: str | Path, profile: Profile, link_url: str, *, pose: bool | None = None,
                 queue_rows: int = 8192, flush_s: float = 0.1) -> None:
        self.path = Path(path)
        self.profile = profile
        self.link_url = link_url
        self.pose = is_simulated(link_url) if pose is None else pose
        self.columns = COLUMNS + (POSE_COLUMNS if self.pose else ()) + (FLAGS_COLUMN, CAUSE_COLUMN, BOUND_COLUMN)
        self.started = datetime.now(UTC)
        self.dropped = 0
        self.written = 0
        self.write_error: str | None = None     # why recording stopped early (a full disk), kept in the sidecar
        self.sidecar_error: str | None = None   # why even the sidecar could not be written
        self._capacity = queue_rows
        self._flush_s = flush_s
        self._queue: deque[str] = deque()
        self._closing = threading.Event()
        self._closed = False
        try:
            created = make_folders(self.path.parent)
        except OutputError as error:
            raise OutputError(str(self.path), f"its folder {error.target} {error.reason}") from None
        self._complete = 0          # bytes of whole lines in the file: a failed write is cut back to this
        try:
            check_stream_target(self.path)      # never write into a device or a folder by mistake
            self._file = open(self.path, "wb", buffering=0)  # unbuffered: each batch of whole lines is one write()
            try:
                self._write((",".join(self.columns) + "\n").encode())
            except BaseException:
                self._file.close()
                self.path.unlink(missing_ok=True)
                raise
        except BaseException:
            remove_folders(created)     # a failed start leaves no empty folder behind
            raise
        self._thread = threading.Thread(target=self._run, name="diffdeck-recorder", daemon=True)
        self._thread.start()

    def put(self, row: Sequence[object]) -> None:
        """Queue one row (values in `columns` order); never blocks: a full queue drops the row and counts it."""
        if len(self._queue) >= self._capacity:
            self.dropped += 1
        else:
            # Formatted here (some microseconds) so the writer thread holds the GIL only briefly: a writer preempted
            # while holding it would delay the loop thread's next wake-up. deque.append is atomic: no lock needed.
            self._queue.append(",".join(map(_cell, row)))

    def _write(self, data: bytes) -> None:
        view = memoryview(data)
        while view:
            view = view[self._file.write(view):]
        self._complete += len(data)

    def _drain(self) -> None:
        lines = []
        queue = self._queue
        while True:
            try:
                line = queue.popleft()
            except IndexError:
                break
            lines.append(line)
        if not lines:
            return
        if self.write_error is not None:    # recording has stopped: every row from now on is counted as dropped
            self.dropped += len(lines)
            return
        try:
            self._write(("\n".join(lines) + "\n").encode())
            self.written += len(lines)
        except OSError as error:   # disk full, medium gone: keep the loop running, stop recording, say why
            self.write_error = (f"recording stopped after {self.written} rows ({reason(error)}); the rows before are "
                                "complete")
            self.dropped += len(lines)
            try:
                self._file.truncate(self._complete)     # no half row at the end: every row left is whole
            except OSError:
                pass        # the medium is gone: the reader skips what is not a whole line

    def _run(self) -> None:
        while not self._closing.wait(self._flush_s):
            self._drain()
        self._drain()

    def close(self, loop_stats: object | None = None, link_stats: object | None = None) -> Path:
        """Write what is queued, close the CSV and write the sidecar; returns the sidecar's path. Idempotent."""
        side = sidecar_path(self.path)
        if self._closed:
            return side
        self._closed = True
        self._closing.set()
        self._thread.join()
        self._file.close()
        meta = {
            "format": FORMAT,
            "csv": self.path.name,
            "columns": list(self.columns),
            "started_utc": self.started.isoformat(timespec="milliseconds"),
            "ended_utc": datetime.now(UTC).isoformat(timespec="milliseconds"),
            "link_url": self.link_url,
            "versions": {"diffdeck": __version__, "python": platform.python_version(), "numpy": numpy.__version__,
                         "pyserial": serial.__version__},
            "profile": {"path": str(self.profile.path), "name": self.profile.name, "data": self.profile.data},
            "loop": loop_stats,
            "link": link_stats,
            "rows_written": self.written,
            "dropped_rows": self.dropped,
            "write_error": self.write_error,
        }
        try:
            write_atomic(side, json.dumps(_json_safe(meta), indent=2) + "\n")
        except OutputError as error:
            self.sidecar_error = error.reason
        return side

    @property
    def problem(self) -> OutputError | None:
        """The error to end the run with when the recording is not what was asked for (None when it is complete)."""
        if self.sidecar_error is not None:
            return OutputError(str(sidecar_path(self.path)), self.sidecar_error
                               + (f"; {self.write_error}" if self.write_error else ""))
        return None if self.write_error is None else OutputError(str(self.path), self.write_error)

    def __enter__(self) -> Recorder:
        return self

    def __exit__(self, *exc: object) -> None:
        self.close()


def read_csv(path: str | Path) -> dict[str, numpy.ndarray]:
    """A recording's columns by name: numbers as float arrays (empty cells -> nan), the words (state, cause, bound)
    as strings (cause and bound empty where none).

    Reads whatever whole lines are there, so it also reads the file a killed process left behind.
    """
    with open(path, encoding="utf-8") as file:
        header = file.readline().rstrip("\n").split(",")
        rows = [line.rstrip("\n").split(",") for line in file if line.strip()]
    columns: dict[str, numpy.ndarray] = {}
    for i, name in enumerate(header):
        cells = [row[i] for row in rows]
        if name in TEXT_COLUMNS:
            columns[name] = numpy.array(cells, dtype=str)
        else:
            columns[name] = numpy.array([float(c) if c else math.nan for c in cells])
    return columns
