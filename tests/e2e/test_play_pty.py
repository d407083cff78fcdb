"""Real tty end to end: `diffdeck sim PROFILE --pty` in one process, `diffdeck play` over that device in another,
with real pyserial on a real pseudo-terminal. Killing either side mid-run must leave the robot stopped and the
recording intact."""

from __future__ import annotations

import json
import os
import signal
import subprocess
import sys
import time
from pathlib import Path

import numpy
import pytest
import serial

from console.profile import load_profile
from console.protocol import Decoder, Flags, Telemetry
from console.record import read_csv, sidecar_path

pytestmark = pytest.mark.e2e

ROOT = Path(__file__).resolve().parents[2]
WREN = ROOT / "profiles" / "wren.toml"
TRACE = "t_s,v_mps,omega_radps\n0.0,0.3,0.0\n2.0,0.5,0.6\n4.0,0.3,-0.4\n6.0,0.0,0.0\n"


def start_sim() -> tuple[subprocess.Popen, str]:
    sim = subprocess.Popen([sys.executable, "-m", "console", "sim", str(WREN), "--pty"], cwd=ROOT,
                           stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True)
    path = sim.stdout.readline().strip()
    assert path.startswith("/dev/"), (path, sim.stderr.read() if sim.poll() is not None else "")
    return sim, path


def start_player(device: str, tmp_path: Path) -> tuple[subprocess.Popen, Path]:
    trace = tmp_path / "trace.csv"
    trace.write_text(TRACE, encoding="utf-8")
    record = tmp_path / "session.csv"
    player = subprocess.Popen([sys.executable, "-m", "console", "play", str(WREN), str(trace), "--link", device,
                               "--yes", "--record", str(record)], cwd=ROOT, stdout=subprocess.PIPE,
                              stderr=subprocess.PIPE, text=True)
    return player, record


def wait_armed(player: subprocess.Popen, sim: subprocess.Popen) -> None:
    deadline = time.monotonic() + 20.0
    while time.monotonic() < deadline:
        line = player.stdout.readline()
        if "armed" in line:
            return
        if not line and player.poll() is not None:
            break
    sim_state = f"sim exited {sim.returncode}: {sim.stderr.read()}" if sim.poll() is not None else "sim running"
    raise AssertionError(f"player never armed: {player.stderr.read()} ({sim_state})")


def stop(process: subprocess.Popen) -> None:
    if process.poll() is None:
        process.send_signal(signal.SIGTERM)
        try:
            process.wait(5)
        except subprocess.TimeoutExpired:
            process.kill()
            process.wait()
    for stream in (process.stdout, process.stderr):
        if stream:
            stream.close()


def test_play_over_a_real_pty_measured_rates_follow_the_commands(tmp_path: Path) -> None:
    sim, device = start_sim()
    try:
        player, record = start_player(device, tmp_path)
        out, err = player.communicate(timeout=60)
        assert player.returncode == 0, err
    finally:
        stop(sim)
    meta = json.loads(sidecar_path(record).read_text(encoding="utf-8"))
    assert meta["link_url"] == device and meta["dropped_rows"] == 0
    rec = read_csv(record)
    states = [s for i, s in enumerate(rec["state"]) if i == 0 or s != rec["state"][i - 1]]
    assert states[:2] == ["disarmed", "armed"] and states[-1] == "stopped"   # the trace ends at rest
    assert "x_m" not in rec                         # over a real link the console cannot know the true pose
    for side in ("left", "right"):
        cmd, meas = rec[f"{side}_cmd_radps"], rec[f"{side}_meas_radps"]
        moving = (rec["state"] == "armed") & ~numpy.isnan(meas)
        # The motors lag (time constant 60 ms, dead time 8 ms) and the link adds a few ms: compare with the command
        # 0.1 s earlier. Wren's measurement noise is 0.05 rad/s; the commands span about 0..13 rad/s.
        t = rec["t_s"]
        earlier = numpy.interp(t[moving] - 0.1, t, cmd)
        error = meas[moving] - earlier
        assert numpy.ptp(cmd[moving]) > 5.0
        assert numpy.sqrt(numpy.mean(error**2)) < 0.6
        assert numpy.corrcoef(meas[moving], earlier)[0, 1] > 0.99


def test_sigkill_of_the_player_leaves_the_robot_stopped_within_watchdog_plus_stopping_time(tmp_path: Path) -> None:
    profile = load_profile(WREN)
    sim, device = start_sim()
    try:
        player, record = start_player(device, tmp_path)
        wait_armed(player, sim)
        time.sleep(2.5)                              # mid-run, on the arc
        player.send_signal(signal.SIGKILL)
        killed_at = time.monotonic()
        player.wait()
        stop(player)
        # Read the robot's telemetry ourselves from the same device the player had open.
        port = serial.serial_for_url(device, baudrate=profile.link.baud, timeout=0)
        opened_at = time.monotonic()
        decoder, seen = Decoder(), []
        while time.monotonic() - opened_at < 1.5:
            for frame in decoder.feed(port.read(4096)):
                if type(frame) is Telemetry:
                    seen.append((time.monotonic(), frame))
            time.sleep(0.005)
        port.close()
    finally:
        stop(sim)
    rec = read_csv(record)
    moving = rec["left_meas_radps"][rec["state"] == "armed"][-10:]
    assert numpy.abs(moving).min() > 3.0            # the robot was well under way when the player died
    fastest = float(numpy.nanmax(numpy.abs(numpy.r_[rec["left_meas_radps"], rec["right_meas_radps"]])))
    sim_cfg = profile.sim
    # Watchdog time, then the firmware's ramp to zero at the torque limit, then the motor's lag (dead time plus five
    # time constants leave under 1 % of the rate, exp(-5) = 0.7 %), plus 0.2 s for process scheduling on a busy host.
    allowed = (profile.link.watchdog_s + fastest / sim_cfg.wheel_accel_radps2 + sim_cfg.motor_dead_time_s
               + 5 * sim_cfg.motor_time_constant_s + 0.2)
    assert opened_at - killed_at < allowed           # we were listening before the robot had to be stopped
    assert seen, "no telemetry from the simulated robot after the kill"
    still = 4 * sim_cfg.noise_radps + 0.05
    rates = [(t, profile.units.measured_from_motor(f.left, f.right), f.flags) for t, f in seen]
    moving_after = [t for t, (left, right), _ in rates if max(abs(left), abs(right)) > still]
    stopped_at = max(moving_after, default=opened_at)
    assert stopped_at - killed_at <= allowed
    assert rates[-1][2] & Flags.WATCHDOG and rates[-1][2] & Flags.STOPPED   # stopped by its watchdog, latched


def test_closing_the_pty_mid_run_gives_exit_3_one_line_and_an_intact_recording(tmp_path: Path) -> None:
    sim, device = start_sim()
    player, record = start_player(device, tmp_path)
    try:
        wait_armed(player, sim)
        time.sleep(1.0)
        sim.send_signal(signal.SIGKILL)              # the robot end of the pty goes away
        sim.wait()
        out, err = player.communicate(timeout=30)
    finally:
        stop(sim)
        stop(player)
    assert player.returncode == 3
    lines = err.strip().splitlines()
    assert len(lines) == 1 and "link lost" in lines[0] and device in lines[0], err
    meta = json.loads(sidecar_path(record).read_text(encoding="utf-8"))
    assert meta["link_url"] == device
    rec = read_csv(record)
    assert len(rec["t_s"]) == meta["rows_written"] > 100
    assert rec["state"][-1] == "stopped"
    assert os.path.getsize(record) > 0 and record.read_text(encoding="utf-8").endswith("\n")
