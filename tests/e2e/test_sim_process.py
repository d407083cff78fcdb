"""`diffdeck sim` as its own process, reached through a real pty (and loopback TCP) with pyserial, as a console would.

Waits here are generous polls (the process runs on the wall clock); they bound how long a broken build hangs, they
do not measure speed (the benchmarks do that).
"""

from __future__ import annotations

import os
import signal
import socket
import subprocess
import sys
import time
from collections.abc import Callable, Iterator
from pathlib import Path

import pytest
import serial

from console.profile import load_profile
from console.protocol import Codec, Flags, Telemetry, WheelCommand

pytestmark = pytest.mark.e2e

ROOT = Path(__file__).resolve().parents[2]
WREN = load_profile(ROOT / "profiles" / "wren.toml")
POLL_S = 0.01


def _start(*where: str) -> tuple[subprocess.Popen[str], str]:
    process = subprocess.Popen([sys.executable, "-m", "console", "sim", str(WREN.path), *where], cwd=ROOT,
                               stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True)
    first = process.stdout.readline().strip() if process.stdout else ""
    return process, first


@pytest.fixture
def pty_sim() -> Iterator[tuple[subprocess.Popen[str], str]]:
    process, path = _start("--pty")
    yield process, path
    if process.poll() is None:
        process.kill()
        process.wait(5)


class Link:
    """A console's view: pyserial port, codec, seq counter, the telemetry received so far."""

    def __init__(self, url: str) -> None:
        self.port = serial.serial_for_url(url, baudrate=WREN.link.baud, timeout=0)
        self.codec = Codec()
        self.seq = 0
        self.telemetry: list[Telemetry] = []

    def command(self, left_radps: float, right_radps: float) -> int:
        self.seq += 1
        self.port.write(self.codec.encode(WheelCommand(self.seq, *WREN.units.to_motor(left_radps, right_radps))))
        return self.seq

    def poll(self) -> None:
        data = self.port.read(4096)
        self.telemetry += [f for f in self.codec.feed(data) if isinstance(f, Telemetry)]

    def drive(self, seconds: float, left_radps: float, right_radps: float) -> None:
        end = time.monotonic() + seconds
        while time.monotonic() < end:
            self.command(left_radps, right_radps)
            self.poll()
            time.sleep(POLL_S)

    def wait_for(self, condition: Callable[[Telemetry], object], seconds: float) -> Telemetry | None:
        end = time.monotonic() + seconds
        while time.monotonic() < end:
            self.poll()
            for frame in self.telemetry:
                if condition(frame):
                    return frame
            self.telemetry.clear()
            time.sleep(POLL_S)
        return None

    def measured(self, frame: Telemetry) -> tuple[float, float]:
        return WREN.units.measured_from_motor(frame.left, frame.right)


def test_pty_first_line_commands_telemetry_watchdog_and_clean_exit(pty_sim: tuple[subprocess.Popen[str], str]) -> None:
    process, path = pty_sim
    assert path.startswith("/dev/") and os.path.exists(path)
    link = Link(path)
    link.command(0.0, 0.0)                              # the release frame
    link.drive(1.5, 6.0, 9.0)
    last = link.telemetry[-1]
    assert last.flags == 0
    assert link.seq - 100 <= last.echo_seq <= link.seq  # echoes what we sent (lags only by scheduling on a busy host)
    # noise_radps = 0.05 in wren.toml: 10 standard deviations of margin
    assert link.measured(last) == pytest.approx((6.0, 9.0), abs=0.5)
    assert last.left_ticks > 0 and last.right_ticks > last.left_ticks
    # Silence: the watchdog trips (flag set), and the wheels come to zero.
    tripped = link.wait_for(lambda f: f.flags & Flags.WATCHDOG, 3.0)
    assert tripped is not None
    stopped = link.wait_for(lambda f: f.flags & Flags.POWER_OFF and max(map(abs, link.measured(f))) < 0.5, 3.0)
    assert stopped is not None
    link.port.close()
    process.send_signal(signal.SIGTERM)
    assert process.wait(5) == 0


def test_telemetry_after_the_console_went_away_is_fresh(pty_sim: tuple[subprocess.Popen[str], str]) -> None:
    """A console that dies leaves nothing stale behind: the next one to open the device reads current frames."""
    process, path = pty_sim
    first = Link(path)
    first.command(0.0, 0.0)
    first.drive(1.0, 8.0, 8.0)
    first.port.close()                                  # as if the console were killed while driving
    time.sleep(1.5)                                     # watchdog time and stopping time pass
    second = Link(path)
    frame = second.wait_for(lambda f: True, 2.0)
    assert frame is not None
    assert frame.flags & Flags.WATCHDOG
    assert max(map(abs, second.measured(frame))) < 0.5
    second.port.close()
    process.send_signal(signal.SIGINT)
    assert process.wait(5) == 0


def test_tcp_loopback_serves_a_socket_client() -> None:
    process, url = _start("--tcp", "127.0.0.1:0")
    try:
        assert url.startswith("socket://127.0.0.1:")
        link = Link(url)
        link.command(0.0, 0.0)
        link.drive(1.0, 5.0, -5.0)
        assert link.telemetry, "no telemetry over TCP"
        assert link.measured(link.telemetry[-1]) == pytest.approx((5.0, -5.0), abs=0.5)
        link.port.close()
        process.send_signal(signal.SIGTERM)
        assert process.wait(5) == 0
    finally:
        if process.poll() is None:
            process.kill()
            process.wait(5)


@pytest.mark.parametrize("where", ["0.0.0.0:5000", "192.0.2.1:5000", "127.0.0.1:70000", "127.0.0.1"])
def test_tcp_refuses_anything_but_a_loopback_address(where: str) -> None:
    result = subprocess.run([sys.executable, "-m", "console", "sim", str(WREN.path), "--tcp", where], cwd=ROOT,
                            capture_output=True, text=True, timeout=30)
    assert result.returncode == 2
    assert result.stdout == ""
    lines = result.stderr.strip().splitlines()
    assert len(lines) == 1 and "--tcp" in lines[0] and where in lines[0] and "loopback" in lines[0]



def test_tcp_port_in_use_is_one_line_and_exit_2() -> None:
    with socket.socket() as taken:
        taken.bind(("127.0.0.1", 0))
        taken.listen(1)
        where = f"127.0.0.1:{taken.getsockname()[1]}"
        result = subprocess.run([sys.executable, "-m", "console", "sim", str(WREN.path), "--tcp", where], cwd=ROOT,
                                capture_output=True, text=True, timeout=30)
    assert result.returncode == 2 and result.stdout == ""
    lines = result.stderr.strip().splitlines()
    assert len(lines) == 1 and where in lines[0] and "cannot listen" in lines[0]
