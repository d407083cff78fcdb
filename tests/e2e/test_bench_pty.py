"""`diffdeck bench` in real time over a real pseudo-terminal to `diffdeck sim --pty`: the typed confirmation, the
program, Ctrl-C, SIGTERM and SIGHUP giving a controlled stop with the recording kept, and `diffdeck report` on the result."""

from __future__ import annotations

import json
import signal
import subprocess
import sys
import time
from pathlib import Path

import numpy as np
import pytest

from console.bench.recording import read_recording
from tests.e2e.test_play_pty import start_sim, stop

pytestmark = pytest.mark.e2e

ROOT = Path(__file__).resolve().parents[2]
WREN = ROOT / "profiles" / "wren.toml"


def _bench(device: str, program: str, out: Path) -> subprocess.Popen:
    bench = subprocess.Popen([sys.executable, "-m", "console", "bench", str(WREN), program, "--link", device,
                              "--out", str(out)], cwd=ROOT, stdin=subprocess.PIPE, stdout=subprocess.PIPE,
                             stderr=subprocess.PIPE, text=True)
    bench.stdin.write("wheels up\n")
    bench.stdin.flush()
    return bench


def test_bench_over_a_pty_runs_in_real_time_and_reports(tmp_path: Path) -> None:
    sim, device = start_sim()
    try:
        started = time.monotonic()
        bench = _bench(device, "spin", tmp_path / "rec")
        _, err = bench.communicate(timeout=90)
        elapsed = time.monotonic() - started
        assert bench.returncode == 0, err
    finally:
        stop(sim)
    csv = next((tmp_path / "rec").glob("*.csv"))
    rec = read_recording(csv)
    assert elapsed >= 11.0                                # the 11 s program ran on the wall clock
    assert not rec.has_pose                               # a real link: no true pose columns
    steady = (rec.t > rec.segments[0].t_start_s + 2.0) & (rec.t < rec.segments[0].t_end_s)
    assert np.nanmean(rec.data["right_meas_radps"][steady]) == pytest.approx(
        np.nanmean(rec.data["right_cmd_radps"][steady]), rel=0.05)
    report = subprocess.run([sys.executable, "-m", "console", "report", str(csv), "-o", str(tmp_path / "rep"),
                             "--json"], cwd=ROOT, capture_output=True, text=True, timeout=120)
    assert report.returncode == 0, report.stderr
    assert json.loads(report.stdout)["fits"]["left"]["r2"] > 0.95


@pytest.mark.parametrize("signum, cause", [(signal.SIGINT, "operator"), (signal.SIGTERM, "signal"),
                                           (signal.SIGHUP, "signal")])
def test_ctrl_c_sigterm_and_sighup_stop_under_control_and_keep_the_recording(tmp_path: Path, signum: int,
                                                                            cause: str) -> None:
    sim, device = start_sim()
    try:
        bench = _bench(device, "ramp", tmp_path / "rec")
        deadline = time.monotonic() + 30
        csv = None
        while time.monotonic() < deadline:       # wait until the program is moving the robot
            csvs = list((tmp_path / "rec").glob("*.csv"))
            if csvs and ",armed" in csvs[0].read_text().splitlines()[-1] and len(csvs[0].read_text()) > 20000:
                csv = csvs[0]
                break
            time.sleep(0.2)
        assert csv is not None, bench.stderr.read() if bench.poll() is not None else "no recording"
        bench.send_signal(signum)
        _, err = bench.communicate(timeout=60)
    finally:
        stop(sim)
    assert bench.returncode == 128 + signum, err
    assert "controlled stop" in err
    rec = read_recording(csv)
    assert rec.data["v_mps"][-1] == 0.0
    side = json.loads(csv.with_name(csv.name + ".bench.json").read_text())
    assert side["completed"] is False and side["cause"] == cause
    assert csv.with_name(csv.name + ".json").exists()          # the recording's own sidecar too


def test_polarity_over_a_pty_asks_what_the_operator_saw(tmp_path: Path) -> None:
    sim, device = start_sim()
    try:
        bench = subprocess.Popen([sys.executable, "-m", "console", "bench", str(WREN), "polarity", "--link", device,
                                  "--out", str(tmp_path / "rec")], cwd=ROOT, stdin=subprocess.PIPE,
                                 stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True)
        _, err = bench.communicate("wheels up\nleft forwards\nRight  Forwards\n", timeout=90)
        assert bench.returncode == 0, err
    finally:
        stop(sim)
    assert "which wheel turned" in err
    csv = next((tmp_path / "rec").glob("*.csv"))
    side = json.loads(csv.with_name(csv.name + ".bench.json").read_text())
    assert side["observed"] == {"left": "left forwards", "right": "right forwards"}
    report = subprocess.run([sys.executable, "-m", "console", "report", str(csv), "-o", str(tmp_path / "rep"),
                             "--json"], cwd=ROOT, capture_output=True, text=True, timeout=120)
    assert [f["kind"] for f in json.loads(report.stdout)["polarity"]["findings"]] == ["ok"]
