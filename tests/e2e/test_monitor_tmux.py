"""The raw frame monitor in a real terminal against the simulated robot on a real pseudo-terminal.

`diffdeck sim --pty` is the robot; between it and the console this test puts a pty of its own and relays the bytes
both ways (a cable with a tap), so it can slip a line with a wrong CRC and a malformed line into the robot's
telemetry. The console (`diffdeck drive --link <our pty>`, its loop in a child process) must show both directions
decoded and raw, mark the two bad lines, and pause.
"""

from __future__ import annotations

import binascii
import os
import select
import threading
import time
import tty

import pytest
import serial

from tests.e2e.test_play_pty import WREN, start_sim, stop
from tests.e2e.tmux_console import TmuxConsole, tmux_missing_reason

pytestmark = pytest.mark.e2e

_reason = tmux_missing_reason()
RELAY_LIMIT_S = 120.0      # the relay never outlives a hung test by more than this


def _bad_lines() -> bytes:
    """A telemetry line whose trailer does not match (a valid one with one digit changed afterwards) and a line that
    starts like a frame but follows no grammar. The CRC is CRC-16/CCITT-FALSE from the standard library's
    binascii.crc_hqx (init 0xFFFF), as PROTOCOL.md specifies."""
    body = b"1 T 7 3 +1.000 -1.000 10 20 12.00 0000"
    good = b"@" + body + b"*%04X\n" % binascii.crc_hqx(body, 0xFFFF)
    return good.replace(b"+1.000", b"+7.000") + b"@1 T 5 garbage*12\n"


class Tap:
    """Relays the robot's pty and ours both ways; `inject` adds bytes on the way to the console."""

    def __init__(self, robot_device: str) -> None:
        self.master, slave = os.openpty()
        tty.setraw(slave)                            # no echo, no line discipline: a plain byte pipe
        self.slave = slave
        self.device = os.ttyname(slave)
        self.robot = serial.Serial(robot_device, timeout=0)
        self._inject = b""
        self._lock = threading.Lock()
        self._done = threading.Event()
        self._thread = threading.Thread(target=self._relay, daemon=True)
        self._thread.start()

    def inject(self, data: bytes) -> None:
        with self._lock:
            self._inject += data

    def _relay(self) -> None:
        robot_fd = self.robot.fileno()
        deadline = time.monotonic() + RELAY_LIMIT_S
        while not self._done.is_set() and time.monotonic() < deadline:
            ready, _, _ = select.select([self.master, robot_fd], [], [], 0.05)
            try:
                if self.master in ready:
                    self.robot.write(os.read(self.master, 4096))
                if robot_fd in ready:
                    data = self.robot.read(4096)
                    with self._lock:
                        if self._inject and data.endswith(b"\n"):   # between two lines, never inside one
                            data, self._inject = data + self._inject, b""
                    os.write(self.master, data)
            except OSError:
                return

    def close(self) -> None:
        self._done.set()
        self._thread.join(2.0)
        self.robot.close()
        os.close(self.master)
        os.close(self.slave)


@pytest.mark.skipif(_reason is not None, reason=_reason or "")
def test_frame_monitor_shows_the_pty_traffic_and_marks_bad_lines() -> None:
    sim, robot_device = start_sim()
    tap = Tap(robot_device)
    console = TmuxConsole([str(WREN), "--link", tap.device, "--mode", "latched", "--no-record"], size=(120, 40))
    try:
        console.started(r"before you drive")
        console.keys("y")                                     # a real link: the cautions first
        console.wait_for(r"telemetry +≤ \d+ ms ago", 30.0)
        console.keys("f")
        screen = console.wait_for(r"rx ← ok +@1 T \d+ \d+ .*Telemetry seq=", 20.0)
        assert "tx → ok" in screen and "DISARMED" in "\n".join(screen.splitlines()[:3])
        tap.inject(_bad_lines())
        screen = console.wait_for(r"rx ← CRC +@1 T 7 3 \+7\.000", 20.0)
        assert "rx ← BAD   @1 T 5 garbage*12" in screen
        assert "space  stop  x  fast stop  q  quit" in screen.splitlines()[-1]
        console.keys("p")
        paused = console.wait_for(r"PAUSED", 10.0)
        time.sleep(0.5)
        frames = [line for line in console.screen().splitlines() if " → " in line or " ← " in line]
        assert frames == [line for line in paused.splitlines() if " → " in line or " ← " in line]
        console.keys("p")
        console.wait_for(r"live \(p pauses\)", 10.0)
        console.keys("Escape")
        console.wait_for(r"request · envelope · output", 10.0)
        screen = console.wait_for(r"errors +crc 1 bad 1", 10.0)   # the loop's own codec counted the same lines
        console.keys("q")
        assert console.wait_closed(), "the console did not exit on q"
    finally:
        console.close()
        tap.close()
        stop(sim)
