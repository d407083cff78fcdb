"""`diffdeck play` on the simulated robot: the trace reaches the loop row by row, bad input leaves nothing behind,
exit codes, Ctrl-C gives a controlled stop and keeps the recording."""

from __future__ import annotations

import json
import os
import pty
import signal
import subprocess
import sys
import time
from pathlib import Path

import numpy
import pytest

from console.cli import main
from console.record import read_csv, sidecar_path
from console.verbs.play import COUNTDOWN_S

ROOT = Path(__file__).resolve().parents[2]
WREN = ROOT / "profiles" / "wren.toml"
TRACE = "t_s,v_mps,omega_radps\n0.0,0.4,0.0\n1.5,0.6,0.8\n3.0,0.2,-0.5\n4.0,0.0,0.0\n"


@pytest.fixture
def trace(tmp_path: Path) -> Path:
    path = tmp_path / "trace.csv"
    path.write_text(TRACE, encoding="utf-8")
    return path


def test_fast_play_on_the_sim_records_the_trace_row_by_row(tmp_path: Path, trace: Path, capsys) -> None:
    record = tmp_path / "out.csv"
    assert main(["play", str(WREN), str(trace), "--link", "sim", "--fast", "--yes", "--record", str(record)]) == 0
    rec = read_csv(record)
    meta = json.loads(sidecar_path(record).read_text(encoding="utf-8"))
    assert meta["link_url"] == "sim" and meta["rows_written"] == len(rec["t_s"]) and meta["dropped_rows"] == 0
    armed = numpy.flatnonzero(rec["state"] == "armed")
    start = rec["t_s"][armed[0] + 1]                      # the trace starts on the first cycle after arming
    rows = numpy.loadtxt(trace, delimiter=",", skiprows=1)
    for t_row, v, omega in rows:                          # each row is in force from its time to the next row's
        k = numpy.flatnonzero(numpy.isclose(rec["t_s"], start + t_row + 0.005, atol=0.006))[0]
        assert (rec["v_req_mps"][k], rec["omega_req_radps"][k]) == (v, omega)
    assert rec["state"][-1] == "stopped"
    assert rec["x_m"][-1] > 0.5                           # the simulated robot went somewhere
    assert "stopped (program end)" in capsys.readouterr().out


def test_fast_is_only_for_the_simulated_robot(tmp_path: Path, trace: Path, capsys) -> None:
    record = tmp_path / "none.csv"
    code = main(["play", str(WREN), str(trace), "--link", "/dev/ttyACM0", "--fast", "--yes", "--record", str(record)])
    assert code == 2
    err = capsys.readouterr().err.strip().splitlines()
    assert len(err) == 1 and "--fast" in err[0] and "/dev/ttyACM0" in err[0]
    assert not record.exists()


def test_bad_trace_is_one_line_exit_2_and_no_recording(tmp_path: Path, capsys) -> None:
    bad = tmp_path / "bad.csv"
    bad.write_text("t_s,v_mps,omega_radps\n0.0,0.4,0.0\n1.0,fast,0.0\n", encoding="utf-8")
    record = tmp_path / "none.csv"
    assert main(["play", str(WREN), str(bad), "--fast", "--yes", "--record", str(record)]) == 2
    err = capsys.readouterr().err.strip().splitlines()
    assert len(err) == 1 and "bad.csv" in err[0] and "fast" in err[0]
    assert not record.exists()


def test_a_missing_device_cannot_be_opened_exit_5(tmp_path: Path, trace: Path, capsys) -> None:
    record = tmp_path / "none.csv"
    missing = str(tmp_path / "ttyACM9")
    assert main(["play", str(WREN), str(trace), "--link", missing, "--yes", "--record", str(record)]) == 5
    err = capsys.readouterr().err.strip().splitlines()
    assert len(err) == 1 and "cannot open the link" in err[0] and missing in err[0]
    assert not record.exists()


@pytest.mark.parametrize("signum", [signal.SIGINT, signal.SIGTERM, signal.SIGHUP])
def test_ctrl_c_sigterm_and_sighup_give_a_controlled_stop_and_keep_the_recording(tmp_path: Path, signum: int) -> None:
    """Ctrl-C, `timeout` / a cancelled job (SIGTERM) and a dropped terminal or ssh session (SIGHUP) all stop the robot
    under control and keep the recording with its sidecar; the exit code is 128 + the signal, as shells report it."""
    long_trace = tmp_path / "long.csv"
    long_trace.write_text("t_s,v_mps,omega_radps\n0.0,0.8,0.0\n60.0,0.0,0.0\n", encoding="utf-8")
    record = tmp_path / "interrupted.csv"
    player = subprocess.Popen([sys.executable, "-m", "console", "play", str(WREN), str(long_trace), "--link", "sim",
                               "--yes", "--record", str(record)], cwd=ROOT, stdout=subprocess.PIPE,
                              stderr=subprocess.PIPE, text=True)
    try:
        for line in player.stdout:
            if "armed" in line:
                break
        rec_rows = 0
        while rec_rows < 150:                              # well under way (1.5 s of rows at 100 Hz)
            rec_rows = max(0, len(record.read_text(encoding="utf-8").splitlines()) - 1) if record.exists() else 0
        player.send_signal(signum)
        out, err = player.communicate(timeout=30)
    finally:
        if player.poll() is None:
            player.kill()
            player.wait()
    assert player.returncode == 128 + signum, err
    assert "controlled stop" in out and err == ""
    rec = read_csv(record)
    assert sidecar_path(record).exists()
    states = [s for i, s in enumerate(rec["state"]) if i == 0 or s != rec["state"][i - 1]]
    assert states == ["disarmed", "armed", "stopping", "stopped"]
    stopping = rec["state"] == "stopping"
    period = json.loads(sidecar_path(record).read_text(encoding="utf-8"))["loop"]["period_s"]
    steps = numpy.round(numpy.diff(rec["t_s"]) / period) * period     # the shaper steps by whole scheduled periods
    rows = stopping[1:] & (steps > 0)        # a cycle started over half a period late rounds to no step: skipped
    decel = -numpy.diff(rec["v_mps"])[rows] / steps[rows]
    assert 0.95 <= decel.max() <= 1.0 + 1e-6            # wren's decel_mps2 (1.0): a controlled stop, not a fast one


def test_fast_play_on_the_sim_asks_for_no_cautions_and_no_countdown(tmp_path: Path, trace: Path, capsys) -> None:
    """--fast runs only on the simulated robot: nothing real moves, so the cautions and the countdown are skipped
    even without --yes (a real-time run on any link keeps them)."""
    record = tmp_path / "out.csv"
    started = time.monotonic()
    assert main(["play", str(WREN), str(trace), "--fast", "--record", str(record)]) == 0
    out = capsys.readouterr().out
    assert "arming in" not in out and "stopped (program end)" in out
    assert time.monotonic() - started < COUNTDOWN_S


def test_a_terminal_shows_the_trace_progress_and_the_state(tmp_path: Path) -> None:
    """In a terminal (a pty here) play shows a progress bar: trace time elapsed / total and the safety state."""
    short = tmp_path / "short.csv"
    short.write_text("t_s,v_mps,omega_radps\n0.0,0.3,0.0\n1.0,0.0,0.0\n", encoding="utf-8")
    controller, terminal = pty.openpty()
    player = subprocess.Popen([sys.executable, "-m", "console", "play", str(WREN), str(short), "--link", "sim",
                               "--yes", "--record", str(tmp_path / "out.csv")], cwd=ROOT, stdin=subprocess.DEVNULL,
                              stdout=subprocess.DEVNULL, stderr=terminal, env={**os.environ, "COLUMNS": "100"})
    os.close(terminal)
    shown = b""
    try:
        while True:
            try:
                chunk = os.read(controller, 4096)
            except OSError:                       # EIO: the player closed its end
                break
            if not chunk:
                break
            shown += chunk
        assert player.wait(30) == 0
    finally:
        os.close(controller)
        if player.poll() is None:
            player.kill()
    text = shown.decode("utf-8", "replace")
    assert "/ 1.0 s" in text and "armed" in text, text[-400:]
