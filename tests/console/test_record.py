"""Session recording: header, sidecar, rows, dropped rows under a stalled disk, and what a SIGKILL leaves behind."""

from __future__ import annotations

import json
import os
import platform
import signal
import subprocess
import sys
import textwrap
import threading
import time
import tomllib
from datetime import UTC, datetime
from pathlib import Path

import numpy
import serial

from console.core.step import LoopStats
from console.profile import load_profile
from console.record import Recorder, default_path, read_csv, sidecar_path
from tests.console.faults import DiskFillsUp

ROOT = Path(__file__).resolve().parents[2]
WREN = ROOT / "profiles" / "wren.toml"
# The header as the issue and the contract spell it (issue 3, "Recording"; /work/contracts.md, console/record.py).
HEADER = ("t_s,v_req_mps,omega_req_radps,v_mps,omega_radps,left_cmd_radps,right_cmd_radps,left_meas_radps,"
          "right_meas_radps,state")
POSE = ",x_m,y_m,heading_rad"
FLAGS = ",flags"          # issue 9, finding 6: every telemetry flag recorded
WHY = ",cause,bound"      # the stop cause and the binding limit the loop knew (a follow-up of issue 14)


def test_header_on_hardware_and_on_the_simulated_robot(tmp_path: Path) -> None:
    profile = load_profile(WREN)
    for url, expected in (("/dev/ttyACM0", HEADER + FLAGS + WHY), ("socket://127.0.0.1:9", HEADER + FLAGS + WHY),
                          ("sim", HEADER + POSE + FLAGS + WHY)):
        path = tmp_path / f"{len(expected)}-{url.replace('/', '_').replace(':', '_')}.csv"
        Recorder(path, profile, url).close()
        assert path.read_text(encoding="utf-8").splitlines() == [expected]


def test_rows_read_back_exactly(tmp_path: Path) -> None:
    profile = load_profile(WREN)
    path = tmp_path / "rows.csv"
    recorder = Recorder(path, profile, "sim")
    rng = numpy.random.default_rng(3)
    rows = []
    for k in range(500):
        values = [float(x) for x in rng.normal(size=12)]
        meas = (None, None) if k % 7 == 0 else (values[7], values[8])   # no telemetry yet -> empty cells
        cause = "" if k % 5 else ("UI stall", "link lost", "operator")[k % 3]      # words with spaces, and none
        bound = "" if k % 4 else ("sideways accel", "jerk")[k % 2]
        row = (k * 0.01, *values[:4], values[4], values[5], *meas, "armed", *values[9:], k % 128, cause, bound)
        rows.append(row)
        recorder.put(row)
    recorder.close()
    columns = read_csv(path)
    assert list(columns) == (HEADER + POSE + FLAGS + WHY).split(",")
    for i, name in enumerate(columns):
        if name in ("state", "cause", "bound"):
            assert columns[name].tolist() == [row[i] for row in rows]
            continue
        expected = numpy.array([numpy.nan if row[i] is None else row[i] for row in rows])
        numpy.testing.assert_array_equal(columns[name], expected)   # repr() of a float reads back exactly


def test_sidecar_has_profile_versions_link_start_time_and_loop_statistics(tmp_path: Path) -> None:
    profile = load_profile(WREN)
    path = tmp_path / "session.csv"
    before = datetime.now(UTC)
    recorder = Recorder(path, profile, "/dev/ttyACM0")
    after = datetime.now(UTC)
    for k in range(10):
        recorder.put((k * 0.01, 0.0, 0.0, 0.0, 0.0, 0.0, 0.0, 0.0, 0.0, "disarmed", 0, "", ""))
    stats = LoopStats(period_s=0.01, cycles=10, overruns=1, period_error_p50_s=1e-5, period_error_p99_s=2e-4,
                      period_error_max_s=3e-4, work_p99_s=1e-4)
    side = recorder.close(stats)
    assert side == sidecar_path(path) == tmp_path / "session.csv.json"
    meta = json.loads(side.read_text(encoding="utf-8"))
    with open(WREN, "rb") as file:
        assert meta["profile"]["data"] == tomllib.load(file)    # the profile as read, via the stdlib TOML reader
    assert meta["versions"] == {"diffdeck": "0.1.0", "python": platform.python_version(),
                                "numpy": numpy.__version__, "pyserial": serial.__version__}
    assert meta["link_url"] == "/dev/ttyACM0"
    assert meta["format"] == "diffdeck recording 2" and meta["columns"] == (HEADER + FLAGS + WHY).split(",")
    started = datetime.fromisoformat(meta["started_utc"])       # ISO 8601 with its UTC offset
    assert started.utcoffset().total_seconds() == 0
    assert before.replace(microsecond=before.microsecond // 1000 * 1000) <= started <= after
    assert meta["loop"] == {"period_s": 0.01, "cycles": 10, "overruns": 1, "period_error_p50_s": 1e-5,
                            "period_error_p99_s": 2e-4, "period_error_max_s": 3e-4, "work_p99_s": 1e-4}
    assert meta["rows_written"] == 10 and meta["dropped_rows"] == 0


def test_a_stalled_disk_drops_rows_and_counts_them(tmp_path: Path) -> None:
    """The writer blocks on a FIFO nobody reads (a stand-in for a stalled disk): put() must not block; every row
    is either written or counted as dropped, and the sidecar says how many were dropped."""
    fifo = tmp_path / "stalled.csv"
    os.mkfifo(fifo)
    reader = os.open(fifo, os.O_RDONLY | os.O_NONBLOCK)
    recorder = Recorder(fifo, load_profile(WREN), "/dev/ttyACM0", queue_rows=64)
    n = 50_000
    for k in range(n):
        recorder.put((k * 0.001, 0.1, 0.2, 0.3, 0.4, 0.5, 0.6, 0.7, 0.8, "armed", 0, "", ""))
    assert recorder.dropped > 0
    closer = threading.Thread(target=recorder.close)
    closer.start()
    received = bytearray()
    while True:
        try:
            chunk = os.read(reader, 1 << 16)
        except BlockingIOError:
            time.sleep(0.001)
            continue
        if not chunk and not closer.is_alive():
            break
        received += chunk
    closer.join()
    os.close(reader)
    lines = received.decode().splitlines()
    assert lines[0] == HEADER + FLAGS + WHY
    meta = json.loads(sidecar_path(fifo).read_text(encoding="utf-8"))
    assert len(lines) - 1 == recorder.written == meta["rows_written"]
    assert recorder.written + recorder.dropped == n
    assert meta["dropped_rows"] == recorder.dropped > 0


CHILD = textwrap.dedent("""
    import sys, time
    from console.profile import load_profile
    from console.record import Recorder
    recorder = Recorder(sys.argv[1], load_profile(sys.argv[2]), "sim")
    print("recording", flush=True)
    k = 0
    while True:
        # t_s is CLOCK_MONOTONIC, shared by every process on the machine: the parent compares it with its kill time
        recorder.put((time.monotonic(), 0.1 * k, 0.2, 0.3, 0.4, 0.5, 0.6, 0.7, 0.8, "armed", 1.0, 2.0, 3.0, 0, "",
                      "accel"))
        k += 1
        time.sleep(0.001)
""")


def test_sigkill_leaves_a_parseable_file_missing_at_most_the_last_0_2_s(tmp_path: Path) -> None:
    path = tmp_path / "killed.csv"
    child = subprocess.Popen([sys.executable, "-c", CHILD, str(path), str(WREN)], cwd=ROOT, stdout=subprocess.PIPE,
                             text=True)
    assert child.stdout.readline().strip() == "recording"
    time.sleep(0.7)
    killed_at = time.monotonic()
    child.send_signal(signal.SIGKILL)
    child.wait()
    child.stdout.close()
    text = path.read_text(encoding="utf-8")
    assert text.endswith("\n")                          # whole lines only: never a half-written row
    columns = read_csv(path)
    assert len(columns["t_s"]) > 100
    for name, values in columns.items():
        assert name in ("state", "cause", "bound") or not numpy.isnan(values).any()
    assert set(columns["cause"]) == {""} and set(columns["bound"]) == {"accel"}
    assert killed_at - columns["t_s"][-1] <= 0.2       # issue 3: at most the last 0.2 s missing
    assert not sidecar_path(path).exists()              # no sidecar: the process never closed the recording


def test_default_path_is_under_recordings_with_profile_name_and_utc_time(tmp_path: Path, monkeypatch) -> None:
    monkeypatch.chdir(tmp_path)
    profile = load_profile(WREN)
    when = datetime(2026, 12, 2, 1, 2, 3, tzinfo=UTC)
    first = default_path(profile, when)
    assert first == Path("recordings/wren-20261202T010203Z.csv")
    Recorder(first, profile, "sim").close()
    second = default_path(profile, when)                # never overwrites an earlier session
    assert second != first and second.parent == Path("recordings")


def test_a_full_disk_stops_recording_keeps_whole_rows_and_the_sidecar_says_why(tmp_path: Path) -> None:
    path = tmp_path / "full.csv"
    recorder = Recorder(path, load_profile(WREN), "/dev/ttyACM0", flush_s=0.01)
    recorder._file = DiskFillsUp(recorder._file, room=1000)     # the header is already written
    for k in range(200):
        recorder.put((k * 0.01, 0.1, 0.2, 0.3, 0.4, 0.5, 0.6, 0.7, 0.8, "armed", 0, "operator", ""))
        if k % 20 == 0:
            time.sleep(0.03)            # let the writer drain in several batches: some fit, then the disk is full
    recorder.close()
    lines = path.read_text(encoding="utf-8").splitlines(keepends=True)
    assert lines[0] == HEADER + FLAGS + WHY + "\n" and len(lines) > 1
    assert all(line.endswith("\n") and line.count(",") == (HEADER + FLAGS + WHY).count(",") for line in lines), \
        lines[-1]
    assert len(lines) - 1 == recorder.written < 200
    meta = json.loads(sidecar_path(path).read_text(encoding="utf-8"))
    assert meta["write_error"] == (f"recording stopped after {recorder.written} rows (No space left on device); "
                                   "the rows before are complete")
    assert meta["rows_written"] + meta["dropped_rows"] == 200
    assert recorder.problem is not None and recorder.problem.exit_code == 6
    assert str(recorder.problem).startswith(f"{path}: recording stopped after ")
    assert sorted(p.name for p in tmp_path.iterdir()) == ["full.csv", "full.csv.json"]


def test_when_even_the_sidecar_cannot_be_written_the_recorder_says_so_and_leaves_no_temporary_file(
        tmp_path: Path, monkeypatch) -> None:
    from console import files

    path = tmp_path / "full.csv"
    recorder = Recorder(path, load_profile(WREN), "/dev/ttyACM0")
    recorder.put((0.01, 0.1, 0.2, 0.3, 0.4, 0.5, 0.6, 0.7, 0.8, "armed", 0, "", ""))
    real_fdopen = os.fdopen
    monkeypatch.setattr(files.os, "fdopen", lambda *a, **k: DiskFillsUp(real_fdopen(*a, **k), room=0))
    recorder.close()
    assert str(recorder.problem) == f"{sidecar_path(path)}: cannot be written (No space left on device)"
    assert sorted(p.name for p in tmp_path.iterdir()) == ["full.csv"]
    assert path.read_text(encoding="utf-8").splitlines()[1].startswith("0.01,")


def test_play_on_a_disk_that_fills_up_stops_the_robot_and_ends_with_exit_6(tmp_path: Path, monkeypatch,
                                                                           capsys) -> None:
    from console.cli import main
    from console.verbs import play

    class FillingRecorder(Recorder):
        def __init__(self, *args, **kwargs) -> None:
            super().__init__(*args, **kwargs)
            self._file = DiskFillsUp(self._file, room=3000)

    monkeypatch.setattr(play, "Recorder", FillingRecorder)
    trace = tmp_path / "trace.csv"
    trace.write_text("t_s,v_mps,omega_radps\n0.0,0.4,0.0\n1.0,0.0,0.0\n", encoding="utf-8")
    record = tmp_path / "rec.csv"
    code = main(["play", str(WREN), str(trace), "--fast", "--yes", "--record", str(record)])
    out, err = capsys.readouterr()
    assert code == 6
    assert err.startswith(f"diffdeck: {record}: recording stopped after ") and err.count("\n") == 1, err
    assert "play: stopped (program end)" in out          # the run went on to a controlled stop at rest
    lines = record.read_text(encoding="utf-8").splitlines(keepends=True)
    assert all(line.endswith("\n") and line.count(",") == lines[0].count(",") for line in lines)
    meta = json.loads(sidecar_path(record).read_text(encoding="utf-8"))
    assert meta["write_error"].startswith("recording stopped after ") and meta["dropped_rows"] > 0
    assert sorted(p.name for p in tmp_path.iterdir()) == ["rec.csv", "rec.csv.json", "trace.csv"]
