"""Hostile inputs and failing outputs through the real entry point (`console.cli.main`), one table.

Every case asserts the documented exit code (README.md, "Exit codes"), that stderr is exactly one line naming the
culprit (file, key or field, value; or the output that failed), and that nothing in the case's folder was left behind
or changed: no temporary file, no half-written output, no replaced symlink, FIFO or device. A full disk is faked
with a file object whose write raises ENOSPC, the errno POSIX gives for it (IEEE Std 1003.1-2017, write()); the tests
run as root, so "unwritable" is faked the same way (EACCES), and no device node is ever written: /dev/null and
/dev/zero are only looked at, and the case checks that they are still character devices afterwards.
"""

from __future__ import annotations

import errno
import io
import os
import signal
import stat
import sys
import tempfile
from collections.abc import Callable
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from console import files
from console.cli import main
from tests.console.faults import DiskFillsUp

ROOT = Path(__file__).resolve().parents[2]
WREN = (ROOT / "profiles" / "wren.toml").read_text(encoding="utf-8")
TEMPLATE = (ROOT / "profiles" / "wren-template.toml").read_text(encoding="utf-8")
TRACE = "t_s,v_mps,omega_radps\n0,0.5,0\n1,0,0\n"
RECORDING_HEADER = ("t_s,v_req_mps,omega_req_radps,v_mps,omega_radps,left_cmd_radps,right_cmd_radps,"
                    "left_meas_radps,right_meas_radps,state")
DEVICES = ("/dev/null", "/dev/zero")


def recording(bad_line: str | None = None, rows: int = 40) -> str:
    lines = [f"{0.01 * (k + 1):.2f},0.5,0,0.4,0,6,6,5.9,5.9,armed" for k in range(rows)]
    if bad_line is not None:
        lines[29] = bad_line            # line 31 of the file
    return RECORDING_HEADER + "\n" + "\n".join(lines) + "\n"


def edit(text: str, old: str, new: str) -> str:
    assert old in text, old
    return text.replace(old, new, 1)


def with_limit(key: str, literal: str) -> str:
    return "\n".join(f"{key} = {literal}" if line.split("=")[0].strip() == key and "=" in line else line
                     for line in WREN.splitlines()) + "\n"


def with_template(key: str, literal: str) -> str:
    return "\n".join(f"{key} = {literal}" if line.startswith(f"{key} =") else line
                     for line in TEMPLATE.splitlines()) + "\n"


def set_key(text: str, section: str, key: str, literal: str) -> str:
    """`key = literal` in [section] (replacing the key there, if it is there)."""
    lines = text.splitlines()
    start = lines.index(f"[{section}]")
    end = next((i for i in range(start + 1, len(lines)) if lines[i].startswith("[")), len(lines))
    body = [line for line in lines[start + 1:end] if line.split("=")[0].strip() != key]
    return "\n".join(lines[:start + 1] + [f"{key} = {literal}"] + body + lines[end:]) + "\n"


# 100 m/s reached at 0.001 m/s^2: a valid profile whose ramps take more than a day
SLOW = set_key(set_key(set_key(set_key(WREN, "limits", "wheel_rate_radps", "2000.0"), "limits", "speed_mps", "100.0"),
                       "limits", "accel_mps2", "0.001"), "limits", "decel_mps2", "0.001")


# -- faults injected into the output path ------------------------------------------------------------------------

def full_disk(monkeypatch: pytest.MonkeyPatch, tmp: Path) -> None:
    real = os.fdopen
    monkeypatch.setattr(files.os, "fdopen", lambda *a, **k: DiskFillsUp(real(*a, **k)))


def unwritable_folder(monkeypatch: pytest.MonkeyPatch, tmp: Path) -> None:
    def refuse(*args: object, **kwargs: object) -> tuple[int, str]:
        raise PermissionError(errno.EACCES, os.strerror(errno.EACCES))
    monkeypatch.setattr(files.tempfile, "mkstemp", refuse)


class _Stdout(io.StringIO):
    def __init__(self, error: type[OSError], code: int) -> None:
        super().__init__()
        self._error, self._code = error, code

    def write(self, text: str) -> int:
        raise self._error(self._code, os.strerror(self._code))

    def flush(self) -> None:
        pass


def stdout_full(monkeypatch: pytest.MonkeyPatch, tmp: Path) -> None:
    monkeypatch.setattr(sys, "stdout", _Stdout(OSError, errno.ENOSPC))


def stdout_closed(monkeypatch: pytest.MonkeyPatch, tmp: Path) -> None:
    monkeypatch.setattr(sys, "stdout", _Stdout(BrokenPipeError, errno.EPIPE))


def sigterm_while_shaping(monkeypatch: pytest.MonkeyPatch, tmp: Path) -> None:
    """SIGTERM arrives while the output is half written (after the 100th row)."""
    from console.verbs import shape as shape_verb

    real = shape_verb.Shaper

    class Interrupted(real):  # type: ignore[misc, valid-type]
        steps = 0

        def step(self, *args: Any) -> Any:
            Interrupted.steps += 1
            if Interrupted.steps == 100:
                os.kill(os.getpid(), signal.SIGTERM)
            return super().step(*args)
    monkeypatch.setattr(shape_verb, "Shaper", Interrupted)


def internal_error(monkeypatch: pytest.MonkeyPatch, tmp: Path) -> None:
    from console.verbs import shape as shape_verb

    def broken(*args: object, **kwargs: object) -> int:
        raise ZeroDivisionError("a bug")
    monkeypatch.setattr(shape_verb, "shape", broken)


# -- the table -----------------------------------------------------------------------------------------------------

@dataclass(frozen=True)
class Case:
    name: str
    argv: tuple[str, ...]           # "{tmp}" is the case's folder
    code: int
    culprit: str                    # must appear in the one line on stderr
    files: dict[str, str | bytes] = field(default_factory=dict)   # name -> content; "fifo:" makes a FIFO
    fault: Callable[[pytest.MonkeyPatch, Path], None] | None = None
    lines: int = 1                  # lines on stderr (0: a closed standard output ends quietly)
    creates: str | None = None      # a complete output written before the failing one (report files, then stdout)


P, T, O = "{tmp}/robot.toml", "{tmp}/trace.csv", "{tmp}/out.csv"
GOOD = {"robot.toml": WREN, "trace.csv": TRACE}
REC = "{tmp}/rec.csv"


def profile_case(name: str, text: str | bytes, culprit: str, code: int = 2) -> Case:
    return Case(name, ("profile", "check", P), code, culprit, {"robot.toml": text})


def trace_case(name: str, text: str | bytes, culprit: str, *options: str) -> Case:
    return Case(name, ("shape", P, T, "-o", O, *options), 2, culprit,
                {"robot.toml": WREN, "trace.csv": text, "out.csv": "previous\n"})


def report_case(name: str, text: str, culprit: str) -> Case:
    return Case(name, ("report", REC, "-o", "{tmp}/report"), 2, culprit, {"rec.csv": text})


CASES = [
    # -- profiles: numbers ----------------------------------------------------------------------------------------
    profile_case("accel 1e-300", with_limit("accel_mps2", "1e-300"), "limits.accel_mps2 = 1e-300: a number from"),
    profile_case("decel 1e-300", with_limit("decel_mps2", "1e-300"), "limits.decel_mps2 = 1e-300"),
    profile_case("jerk 1e-300", with_limit("jerk_mps3", "1e-300"), "limits.jerk_mps3 = 1e-300"),
    profile_case("wheel rate 1e300", with_limit("wheel_rate_radps", "1e300"), "limits.wheel_rate_radps = 1e+300"),
    profile_case("speed true", with_limit("speed_mps", "true"), "limits.speed_mps = True"),
    profile_case("speed nan", with_limit("speed_mps", "nan"), "limits.speed_mps = nan"),
    profile_case("baud 10**30", with_limit("baud", str(10**30)), f"link.baud = {10**30}: a whole number from 50"),
    profile_case("seed 2**70", edit(WREN, "seed = 7", f"seed = {2**70}"), f"sim.seed = {2**70}"),
    profile_case("battery 1e6", edit(WREN, "battery_v = 12.6", "battery_v = 1e6"), "sim.battery_v = 1000000.0"),
    profile_case("ticks past the wire", edit(WREN, 'unit = "rpm"', 'unit = "ticks_per_s"').replace(
        "ticks_per_rev = 48", "ticks_per_rev = 100000").replace("gear_ratio = 30.0", "gear_ratio = 50.0"),
        "units.ticks_per_rev = 100000.0: with unit = \"ticks_per_s\""),
    profile_case("rpm past the wire", edit(WREN, "gear_ratio = 30.0", "gear_ratio = 20000.0"),
                 "units.gear_ratio = 20000.0: "),
    # -- profiles: structure ----------------------------------------------------------------------------------------
    profile_case("nested 2000 deep", WREN + "[extra]\nx = " + "[" * 2000 + "]" * 2000 + "\n",
                 "TOML syntax = '': arrays or tables nested too deeply"),
    profile_case("misspelt key", WREN.replace("speed_mps = 1.0 ", "sped_mps = 1.0 ", 1),
                 "limits.sped_mps = 1.0: unknown key (did you mean speed_mps?)"),
    profile_case("misspelt section", WREN.replace("[limits]", "[limit]"),
                 "[limit] = {a table}: unknown section (did you mean [limits]?)"),
    profile_case("unknown section", WREN + "[motors]\nleft = 1\n", "[motors] = {a table}: unknown section"),
    profile_case("unknown key", edit(WREN, "[sim]", "[sim]\nmass_kg = 9.0"), "sim.mass_kg = 9.0: unknown key"),
    profile_case("name with a line break", WREN.replace('name = "Wren', 'name = "Wren\\nrm -rf', 1),
                 "robot.name = 'Wren\\nrm -rf"),
    profile_case("a megabyte of name", WREN.replace('name = "Wren', 'name = "' + "W" * 1000, 1),
                 "robot.name = 'WWWW"),
    profile_case("an inline table for a number", with_limit("speed_mps", "{ a = [" + "1, " * 5000 + "] }"),
                 "limits.speed_mps = {'a': [1, 1,"),
    profile_case("TOML syntax", WREN + "x = = 1\n", "TOML syntax"),
    profile_case("profile not UTF-8", b"\xff\xfe" + WREN.encode(), "file = 'byte 0': not UTF-8"),
    profile_case("over a megabyte", WREN + "#" * (1 << 20) + "\n", "at most 1048576 bytes for a TOML profile"),
    Case("profile missing", ("profile", "check", "{tmp}/nothing.toml"), 2, "nothing.toml: file = "),
    Case("profile is a FIFO", ("profile", "check", "{tmp}/pipe"), 2, "is a FIFO", {"pipe": "fifo:"}),
    Case("profile is a folder", ("profile", "check", "{tmp}"), 2, "is a folder"),
    Case("profile is /dev/zero", ("profile", "check", "/dev/zero"), 2, "/dev/zero: file = '/dev/zero': is a character "
                                                                      "device"),
    # -- profiles: templates and links ----------------------------------------------------------------------------
    profile_case("format too wide", with_template("command_format", '"drv {left:300.4f} {right}"'),
                 "link.template.command_format = 'drv {left:300.4f} {right}': {left:300.4f} renders wider"),
    profile_case("format 500000000 wide", with_template("command_format", '"drv {left:500000000} {right}"'),
                 "{left:500000000} renders wider than the robot's line"),
    profile_case("format attribute", with_template("command_format", '"drv {left.__class__} {right}"'),
                 "unknown field {left.__class__}"),
    profile_case("format !r", with_template("command_format", '"drv {left!r} {right}"'),
                 "{left!r:} is not a plain number field"),
    profile_case("format index", with_template("stop_format", '"halt {seq[0]}"'), "unknown field {seq[0]}"),
    profile_case("catastrophic regex", with_template("telemetry_regex", r"'^(?P<left>(\d+)+) (?P<right>\d+)$'"),
                 "link.template.telemetry_regex = '^(?P<left>(\\\\d+)+) (?P<right>\\\\d+)$': takes more than"),
    profile_case("telemetry_format", edit(TEMPLATE, "stop_format =", "telemetry_format = \"fb {left}\"\nstop_format ="),
                 "link.template.telemetry_format = 'fb {left}': unknown key"),
    profile_case("url port 99999", edit(WREN, 'url = "sim"', 'url = "socket://127.0.0.1:99999"'),
                 "link.url = 'socket://127.0.0.1:99999': socket://host:port with a port from 1 to 65535"),
    profile_case("url without port", edit(WREN, 'url = "sim"', 'url = "socket://127.0.0.1"'),
                 "link.url = 'socket://127.0.0.1': socket://host:port with a host and a port"),
    profile_case("url empty", edit(WREN, 'url = "sim"', 'url = ""'), "link.url = '': a non-empty string"),
    profile_case("url relative", edit(WREN, 'url = "sim"', 'url = "ttyUSB0"'),
                 "link.url = 'ttyUSB0': \"sim\", a device path"),
    # -- request traces -------------------------------------------------------------------------------------------
    trace_case("last row at 1e9 s", TRACE + "1e9,0,0\n", "trace.csv, line 4: t_s = '1e9': at most 86400 s (24 h)"),
    trace_case("last row at 1e308 s", TRACE + "1e308,0,0\n", "t_s = '1e308': at most 86400 s"),
    trace_case("value 1_0", TRACE.replace("0,0.5,0", "0,1_0,0"), "trace.csv, line 2: v_mps = '1_0': a finite number"),
    trace_case("value inf", TRACE.replace("0,0.5,0", "0,inf,0"), "line 2: v_mps = 'inf'"),
    trace_case("value nan", TRACE.replace("1,0,0", "1,0,nan"), "line 3: omega_radps = 'nan'"),
    trace_case("value text", TRACE.replace("1,0,0", "1,fast,0"), "line 3: v_mps = 'fast'"),
    trace_case("header wrong", "time,speed,turn\n0,1,0\n", "line 1: header = 'time,speed,turn'"),
    trace_case("empty trace", "", "line 1: header = ''"),
    trace_case("no rows", "t_s,v_mps,omega_radps\n", "rows = '(none)'"),
    trace_case("four fields", TRACE + "2,0,0,9\n", "line 4: row = '2,0,0,9'"),
    trace_case("trace times go back", TRACE + "0.5,0,0\n", "line 4: t_s = '0.5'"),
    trace_case("negative time", "t_s,v_mps,omega_radps\n-1,0,0\n", "line 2: t_s = '-1'"),
    trace_case("trace not UTF-8", b"t_s,v_mps,omega_radps\n0,\xff,0\n", "not UTF-8"),
    trace_case("until 1e12 s", TRACE, "--until-s = 1000000000000.0: a time greater than 0 and at most 86400 s",
               "--until-s", "1e12"),
    trace_case("until nan", TRACE, "--until-s = nan", "--until-s", "nan"),
    trace_case("until -1", TRACE, "--until-s = -1.0", "--until-s", "-1"),
    trace_case("rate 5 Hz", TRACE, "--rate-hz = 5.0", "--rate-hz", "5"),
    trace_case("rate not a number", TRACE, "argument --rate-hz: invalid float value: 'abc'", "--rate-hz", "abc"),
    trace_case("mode unknown", TRACE, "argument --mode: invalid choice: 'smooth'", "--mode", "smooth"),
    Case("limits that take days to settle", ("shape", P, T, "-o", O), 2,
         "robot.toml: limits = '", {"robot.toml": SLOW, "trace.csv": TRACE}),
    Case("trace is a FIFO", ("shape", P, "{tmp}/pipe"), 2, "pipe: file = ", {"robot.toml": WREN, "pipe": "fifo:"}),
    Case("trace is /dev/zero", ("shape", P, "/dev/zero"), 2, "is a character device", {"robot.toml": WREN}),
    Case("trace is a folder", ("shape", P, "{tmp}"), 2, "is a folder", {"robot.toml": WREN}),
    Case("unknown verb", ("steer", P), 2, "argument VERB: invalid choice: 'steer'"),
    # -- output paths ---------------------------------------------------------------------------------------------
    Case("-o a folder", ("shape", P, T, "-o", "{tmp}/sub"), 6, "sub: exists and is a folder",
         {**GOOD, "sub/keep.txt": "x"}),
    Case("-o in a missing folder", ("shape", P, T, "-o", "{tmp}/nowhere/out.csv"), 6, "nowhere does not exist", GOOD),
    Case("-o in an unwritable folder", ("shape", P, T, "-o", O), 6, "out.csv: cannot be written (Permission denied)",
         GOOD, unwritable_folder),
    Case("-o a symlink", ("shape", P, T, "-o", "{tmp}/link.csv"), 6, "link.csv: exists and is a symlink",
         {**GOOD, "real.csv": "kept\n", "link.csv": "symlink:real.csv"}),
    Case("-o a FIFO", ("shape", P, T, "-o", "{tmp}/pipe"), 6, "pipe: exists and is a FIFO",
         {**GOOD, "pipe": "fifo:"}),
    Case("-o /dev/null", ("shape", P, T, "-o", "/dev/null"), 6, "/dev/null: exists and is a character device", GOOD),
    Case("-o /dev/stdout", ("shape", P, T, "-o", "/dev/stdout"), 6, "/dev/stdout: exists and is a symlink", GOOD),
    Case("-o on a full disk", ("shape", P, T, "-o", O), 6, "out.csv: cannot be written (No space left on device)",
         {**GOOD, "out.csv": "previous\n"}, full_disk),
    Case("shape to a full stdout", ("shape", P, T), 6, "standard output: cannot be written (No space left", GOOD,
         stdout_full),
    Case("shape to a closed pipe", ("shape", P, T), 141, "", GOOD, stdout_closed, lines=0),
    Case("profile --json to a full stdout", ("profile", "check", P, "--json"), 6, "standard output: cannot be",
         GOOD, stdout_full),
    Case("profile check to a full stdout", ("profile", "check", P), 6, "standard output: cannot be", GOOD,
         stdout_full),
    Case("SIGTERM while writing -o", ("shape", P, T, "-o", O), 143, "ended by SIGTERM",
         {**GOOD, "out.csv": "previous\n"}, sigterm_while_shaping),
    Case("internal error", ("shape", P, T, "-o", O), 70, "internal error (ZeroDivisionError: a bug); the traceback is "
                                                         "in ", GOOD, internal_error),
    # -- recordings (report) ----------------------------------------------------------------------------------------
    report_case("header only", RECORDING_HEADER + "\n", "rec.csv: rows = 0: at least 20 data rows"),
    report_case("inf in a recording", recording("0.30,0.5,0,inf,0,6,6,5.9,5.9,armed"),
                "rec.csv: line 31, v_mps = 'inf': a finite number"),
    report_case("1_0 in a recording", recording("0.30,0.5,0,1_0,0,6,6,5.9,5.9,armed"), "line 31, v_mps = '1_0'"),
    report_case("text in a recording", recording("0.30,0.5,0,0.4,0,6,6,abc,5.9,armed"),
                "line 31, left_meas_radps = 'abc'"),
    report_case("short row", recording("0.30,0.5,0"), "line 31 = '3 fields': 10 comma-separated fields"),
    report_case("recording times go back", recording("0.01,0.5,0,0.4,0,6,6,5.9,5.9,armed"), "line 31 t_s = 0.01"),
    Case("sidecar radius -1", ("report", REC, "-o", "{tmp}/report"), 2, "rec.csv.json: wheel_radius_m = -1",
         {"rec.csv": recording(), "rec.csv.json": '{"profile": {"data": {"geometry": {"wheel_radius_m": -1}}}}'}),
    Case("bench sidecar program 7", ("report", REC, "-o", "{tmp}/report"), 2, "rec.csv.bench.json: geometry or "
         "program = ", {"rec.csv": recording(), "rec.csv.bench.json": '{"geometry": 5, "program": 7}'}),
    Case("sidecar nested 100000 deep", ("report", REC, "-o", "{tmp}/report"), 2, "rec.csv.json: file = 'rec.csv.json'"
         ": a readable JSON sidecar (RecursionError)", {"rec.csv": recording(),
                                                         "rec.csv.json": "[" * 100000 + "]" * 100000}),
    Case("report --tau-c 0", ("report", REC, "-o", "{tmp}/report", "--tau-c", "0"), 2,
         "--tau-c = 0.0: a time > 0 and <= 60 s", {"rec.csv": recording()}),
    Case("report --tau-c nan", ("report", REC, "-o", "{tmp}/report", "--tau-c", "nan"), 2, "--tau-c = nan",
         {"rec.csv": recording()}),
    Case("recording is a FIFO", ("report", "{tmp}/pipe", "-o", "{tmp}/report"), 2, "is a FIFO", {"pipe": "fifo:"}),
    # -- recordings (replay) ------------------------------------------------------------------------------------------
    Case("replay a request trace", ("replay", T), 2, "trace.csv: header = 't_s,v_mps,omega_radps': a diffdeck "
         "recording", GOOD),
    Case("replay a FIFO", ("replay", "{tmp}/pipe"), 2, "is a FIFO", {"pipe": "fifo:"}),
    Case("replay with no sidecar and no profile", ("replay", REC), 2, "rec.csv.json: file = 'missing': the sidecar",
         {"rec.csv": recording()}),
    Case("replay inf", ("replay", REC, "--profile", P), 2, "rec.csv: line 31, v_mps = 'inf': a finite number",
         {"rec.csv": recording("0.30,0.5,0,inf,0,6,6,5.9,5.9,armed"), "robot.toml": WREN}),
    Case("replay an unknown state", ("replay", REC, "--profile", P), 2, "line 31, state = 'cruising': one of",
         {"rec.csv": recording("0.30,0.5,0,0.4,0,6,6,5.9,5.9,cruising"), "robot.toml": WREN}),
    Case("replay --at past the end", ("replay", REC, "--profile", P, "--at", "5"), 2,
         "--at = 5.0: a time within the recording, 0.010 to 0.400 s", {"rec.csv": recording(), "robot.toml": WREN}),
    Case("recording missing", ("report", "{tmp}/none.csv", "-o", "{tmp}/report"), 2, "none.csv: file = "),
    Case("report -o a file", ("report", REC, "-o", "{tmp}/taken"), 6, "taken: exists and is not a folder",
         {"rec.csv": recording(), "taken": "x"}),
    Case("report -o under a file", ("report", REC, "-o", "{tmp}/taken/sub"), 6,
         "taken/sub: the folder cannot be created", {"rec.csv": recording(), "taken": "x"}),
    Case("report on a full disk", ("report", REC, "-o", "{tmp}/report/deep"), 6, "cannot be written (No space left",
         {"rec.csv": recording()}, full_disk),
    Case("report --json to a full stdout", ("report", REC, "-o", "{tmp}/report", "--json"), 6,
         "standard output: cannot be", {"rec.csv": recording()}, stdout_full, creates="report"),
    # -- bench programs ---------------------------------------------------------------------------------------------
    Case("program is a FIFO", ("bench", P, "{tmp}/pipe"), 2, "pipe: file = ", {"robot.toml": WREN, "pipe": "fifo:"}),
    Case("program nested 2000 deep", ("bench", P, "{tmp}/deep.toml"), 2, "deep.toml: syntax = '': arrays or tables "
         "nested too deeply", {"robot.toml": WREN, "deep.toml": "x = " + "[" * 2000 + "]" * 2000 + "\n"}),
    Case("program not TOML", ("bench", P, "{tmp}/bad.toml"), 2, "bad.toml: syntax = ", {"robot.toml": WREN,
                                                                                        "bad.toml": "x = = 1\n"}),
    # -- links and recordings on a link ---------------------------------------------------------------------------
    Case("play on a missing device", ("play", P, T, "--link", "{tmp}/ttyACM9", "--yes", "--record", O), 5,
         "cannot open the link {tmp}/ttyACM9: No such file or directory", GOOD),
    Case("play on a bad port", ("play", P, T, "--link", "socket://127.0.0.1:99999", "--yes", "--record", O), 2,
         "url = 'socket://127.0.0.1:99999'", GOOD),
    Case("play on an empty link", ("play", P, T, "--link", "socket://", "--yes", "--record", O), 2, "url = 'socket://'",
         GOOD),
    Case("play recording onto /dev/null", ("play", P, T, "--fast", "--yes", "--record", "/dev/null"), 6,
         "/dev/null: exists and is a character device", GOOD),
    Case("bench --out under a file", ("bench", P, "spin", "--out", "{tmp}/taken/sub"), 6,
         "taken/sub: cannot be created", {"robot.toml": WREN, "taken": "x"}),
    Case("play --record under a file", ("play", P, T, "--fast", "--yes", "--record", "{tmp}/taken/deep/rec.csv"), 6,
         "rec.csv: --record: the folder {tmp}/taken/deep does not exist",
         {**GOOD, "taken": "x"}),
    Case("play recording into a folder", ("play", P, T, "--fast", "--yes", "--record", "{tmp}/sub"), 6,
         "sub: exists and is a folder", {**GOOD, "sub/keep.txt": "x"}),
]


def _make(tmp: Path, files_: dict[str, str | bytes]) -> None:
    for name, content in files_.items():
        path = tmp / name
        path.parent.mkdir(parents=True, exist_ok=True)
        if content == "fifo:":
            os.mkfifo(path)
        elif isinstance(content, str) and content.startswith("symlink:"):
            path.symlink_to(tmp / content.removeprefix("symlink:"))
        elif isinstance(content, bytes):
            path.write_bytes(content)
        else:
            path.write_text(content, encoding="utf-8")


def _snapshot(tmp: Path) -> dict[str, object]:
    """Every entry under the case's folder: kind and content (a symlink by its target, a FIFO by its kind)."""
    seen: dict[str, object] = {}
    for path in sorted(tmp.rglob("*")):
        mode = path.lstat().st_mode
        key = str(path.relative_to(tmp))
        if stat.S_ISLNK(mode):
            seen[key] = ("symlink", os.readlink(path))
        elif stat.S_ISREG(mode):
            seen[key] = ("file", path.read_bytes())
        else:
            seen[key] = (stat.S_IFMT(mode),)
    return seen


@pytest.mark.parametrize("case", CASES, ids=[case.name for case in CASES])
def test_hostile_input_or_failing_output(case: Case, tmp_path: Path, monkeypatch: pytest.MonkeyPatch,
                                         capsys: pytest.CaptureFixture[str]) -> None:
    tmp = tmp_path / "case"
    tmp.mkdir()
    logs = tmp_path / "logs"
    logs.mkdir()
    monkeypatch.setattr(tempfile, "tempdir", str(logs))     # where an internal error's log goes
    monkeypatch.chdir(tmp_path)
    _make(tmp, case.files)
    before = _snapshot(tmp)
    devices = {device: os.lstat(device).st_mode for device in DEVICES}
    if case.fault is not None:
        case.fault(monkeypatch, tmp)
    argv = [arg.replace("{tmp}", str(tmp)) for arg in case.argv]
    try:
        code = main(argv)
    except SystemExit as exit_:             # argparse ends usage errors this way, after its one line
        code = exit_.code
    monkeypatch.undo()
    err = capsys.readouterr().err
    assert code == case.code, err
    assert err.count("\n") == case.lines and (case.lines == 0 or err.endswith("\n")), err
    assert err.startswith("diffdeck") or case.lines == 0, err
    assert case.culprit.replace("{tmp}", str(tmp)) in err, err
    assert "Traceback" not in err and len(err) < 800, err      # one line a person can read, whatever the input
    after = _snapshot(tmp)
    if case.creates is not None:
        made = {key for key in after if key.split("/")[0] == case.creates}
        assert made and all(key not in before for key in made)
        after = {key: value for key, value in after.items() if key not in made}
    assert after == before
    assert {device: os.lstat(device).st_mode for device in DEVICES} == devices
    assert sorted(p.name for p in tmp_path.iterdir()) == ["case", "logs"]
    if case.code == 70:
        log = next(logs.iterdir())
        assert str(log) in err and "ZeroDivisionError: a bug" in log.read_text()
    else:
        assert list(logs.iterdir()) == []


def test_the_table_is_big_enough_and_its_names_unique() -> None:
    assert len(CASES) >= 60 and len({case.name for case in CASES}) == len(CASES)


# -- any value for any number: exit 0 or 2, never anything else ----------------------------------------------------

NUMBER_KEYS = [("limits", key) for key in ("speed_mps", "reverse_speed_mps", "turn_rate_radps", "accel_mps2",
                                           "decel_mps2", "jerk_mps3", "turn_accel_radps2", "turn_jerk_radps3",
                                           "sideways_accel_mps2", "wheel_rate_radps", "wheel_accel_radps2",
                                           "stop_decel_mps2", "stop_jerk_mps3")] + \
              [("geometry", "wheel_radius_m"), ("geometry", "track_width_m"), ("units", "gear_ratio"),
               ("units", "ticks_per_rev"), ("units", "trim_left"), ("link", "baud"), ("link", "rate_hz"),
               ("link", "watchdog_s"), ("sim", "motor_time_constant_s"), ("sim", "noise_radps"), ("sim", "seed"),
               ("sim", "encoder_ticks_per_rev"), ("sim", "telemetry_rate_hz"), ("sim", "battery_v")]
TOML_NUMBERS = st.one_of(
    st.floats(allow_nan=True, allow_infinity=True).map(repr),       # repr gives TOML's own inf, -inf and nan
    st.integers(-(2**63), 2**63 - 1).map(str),
    st.sampled_from(["1e-300", "1e300", "5e-324", "-0.0", "0", "true", '"1"', "[1]", "{}", "1_000"]),
)


@settings(max_examples=300, deadline=None, suppress_health_check=[HealthCheck.function_scoped_fixture])
@given(st.lists(st.tuples(st.sampled_from(NUMBER_KEYS), TOML_NUMBERS), min_size=1, max_size=4))
def test_any_numbers_in_a_profile_give_exit_0_or_one_line_and_exit_2(tmp_path: Path,
                                                                      capsys: pytest.CaptureFixture[str],
                                                                      changes: list[tuple[tuple[str, str], str]]
                                                                      ) -> None:
    text = WREN
    for (section, key), literal in changes:
        text = set_key(text, section, key, literal)
    path = tmp_path / "fuzz.toml"
    path.write_text(text, encoding="utf-8")
    code = main(["profile", "check", str(path), "--json"])
    out, err = capsys.readouterr()
    assert (code == 0 and err == "") or (code == 2 and err.count("\n") == 1 and err.startswith("diffdeck: ")), err
