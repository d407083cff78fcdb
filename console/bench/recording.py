"""Reading a session recording (CSV + sidecars) into numpy arrays for the report; bad files are one-line errors."""

from __future__ import annotations

import io
import json
import math
import warnings
from dataclasses import dataclass
from pathlib import Path
from typing import Any

import numpy as np

from console.bench.program import LEVEL_FIELDS, Axis, BoundSegment, Kind, Segment
from console.bench.run import bench_sidecar_path
from console.files import read_input
from console.record import COLUMNS, POSE_COLUMNS, RecordingError, name_first_bad_cell, sidecar_path

NUMERIC = tuple(c for c in COLUMNS if c != "state")
MIN_ROWS = 20
FORMAT_1 = "diffdeck bench 1"
"""The first bench sidecar format: its segments are converted in one place (`_from_format_1`)."""


@dataclass(frozen=True, slots=True)
class Recording:
    path: Path
    data: dict[str, np.ndarray]         # every numeric column by name (NaN where the field was empty)
    wheel_radius_m: float | None
    track_width_m: float | None
    top_speed_mps: float | None
    segments: tuple[BoundSegment, ...]   # in recording time: from the bench sidecar, or the whole recording
    program: str | None
    bench: dict[str, Any] | None

    @property
    def has_pose(self) -> bool:
        return all(name in self.data for name in POSE_COLUMNS)

    @property
    def t(self) -> np.ndarray:
        return self.data["t_s"]


def _fail(path: Path, key: str, value: object, allowed: str) -> RecordingError:
    return RecordingError(str(path), key, value, allowed)


def _json(path: Path) -> dict[str, Any] | None:
    try:
        data = json.loads(path.read_text(encoding="utf-8"))
    except FileNotFoundError:
        return None
    except (OSError, ValueError, RecursionError) as error:
        raise _fail(path, "file", path.name, f"a readable JSON sidecar ({error.__class__.__name__})") from None
    return data if isinstance(data, dict) else None


def read_recording(path: str | Path) -> Recording:
    path = Path(path)
    raw = read_input(path, "a CSV recording")
    head, _, body = raw.partition(b"\n")
    del raw
    header = head.decode("utf-8", "replace").strip()
    columns = header.split(",")
    if tuple(columns[: len(COLUMNS)]) != COLUMNS:
        raise _fail(path, "header", header[:80], "a diffdeck recording header beginning " + ",".join(COLUMNS))
    pose = tuple(columns[len(COLUMNS):len(COLUMNS) + 3]) == POSE_COLUMNS
    names = NUMERIC + (POSE_COLUMNS if pose else ())
    usecols = [columns.index(name) for name in names]
    # Bytes, not str: numpy's reader takes them as they are (a str copy would cost 4 bytes per character).
    # Empty fields (no measurement yet) become nan; two passes cover runs of empty fields.
    filled = body.replace(b",,", b",nan,").replace(b",,", b",nan,").replace(b",\n", b",nan\n")
    if filled.endswith(b","):
        filled += b"nan"
    try:
        with warnings.catch_warnings():     # numpy warns about an empty body; "rows" below says it in one line
            warnings.simplefilter("ignore")
            table = np.loadtxt(io.BytesIO(filled), delimiter=",", usecols=usecols, ndmin=2, dtype=float)
    except ValueError:
        table = None
    del filled
    if table is None or b"_" in body or np.isinf(table).any():
        name_first_bad_cell(path, body, columns, checked=usecols)
    del body
    assert table is not None, "name_first_bad_cell raises on whatever numpy refused"
    if table.shape[0] < MIN_ROWS:
        raise _fail(path, "rows", table.shape[0], f"at least {MIN_ROWS} data rows")
    data = {name: table[:, i].copy() for i, name in enumerate(names)}
    t = data["t_s"]
    bad = np.flatnonzero(~np.isfinite(t) | (np.diff(t, prepend=-np.inf) <= 0.0))
    if bad.size:
        raise _fail(path, f"line {int(bad[0]) + 2} t_s", float(t[bad[0]]), "finite times, strictly increasing")
    for name in ("left_meas_radps", "right_meas_radps"):
        if np.count_nonzero(np.isfinite(data[name])) < MIN_ROWS:
            raise _fail(path, name, "empty", f"measured wheel rates in at least {MIN_ROWS} rows (the robot sent no "
                                             "telemetry?)")
    bench = _json(bench_sidecar_path(path))
    meta = _json(sidecar_path(path)) or {}
    side = bench_sidecar_path(path) if bench is not None else sidecar_path(path)
    radius = track = top = program = None
    try:
        if bench is not None:
            radius, track = bench["geometry"]["wheel_radius_m"], bench["geometry"]["track_width_m"]
            top = bench.get("top_speed_mps")
            program = str(bench["program"]["name"])
        else:
            geometry = ((meta.get("profile") or {}).get("data") or {}).get("geometry") or {}
            radius, track = geometry.get("wheel_radius_m"), geometry.get("track_width_m")
    except (KeyError, TypeError, AttributeError) as error:
        raise _fail(side, "geometry or program", repr(error)[:60], "the fields diffdeck writes in a sidecar") \
            from None
    for name, value in (("wheel_radius_m", radius), ("track_width_m", track), ("top_speed_mps", top)):
        if value is not None and (isinstance(value, bool) or not isinstance(value, int | float)
                                  or not math.isfinite(value) or value <= 0):
            raise _fail(side, name, value, "a number > 0, or left out")
    segments = _segments(path, bench, float(t[0]), float(t[-1]))
    return Recording(path, data, radius, track, top, segments, program, bench)


def _segments(path: Path, bench: dict[str, Any] | None, t_first: float, t_last: float) -> tuple[BoundSegment, ...]:
    if bench is None:
        whole = Segment(0, "whole recording", Kind.RECORD, Axis.SPEED, t_last - t_first)
        return (BoundSegment(whole, t_first, t_last, 0.0, 0.0, 0.0, 0.0),)
    try:
        written = [_from_format_1(s) if bench.get("format") == FORMAT_1 else s for s in bench["segments"]]
        segments = tuple(BoundSegment.from_json(s) for s in written)
    except (KeyError, TypeError, ValueError) as error:
        raise _fail(bench_sidecar_path(path), "segments", repr(error)[:60], "the segment list `bench` writes") from None
    # A run stopped early (Ctrl-C) keeps only the segments that began before its end.
    return tuple(s for s in segments if s.t_start_s < t_last)


def _from_format_1(segment: dict[str, Any]) -> dict[str, Any]:
    """A segment of a format-1 bench sidecar in today's shape. Format 1 kept only the resolved levels (they stand
    in as absolute levels as written), no duration (its times give it) and no chirp frequencies (0, linear)."""
    return {"duration_s": float(segment["t_end_s"]) - float(segment["t_start_s"]), "f0_hz": 0.0, "f1_hz": 0.0,
            "method": "linear", "levels": {name: {"value": segment[name], "percent": False} for name in LEVEL_FIELDS},
            **segment}
