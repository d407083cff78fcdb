"""Finding 4 of issue 9: the terminal of `drive` going away (its tmux session killed) at any moment must still put a
stop frame on the wire, close the recording with its sidecar, and leave the robot stopped by the console, not by its
own watchdog. A race, so it is tried at 20 random moments: before arming, while arming, ramping and cruising.

The simulated robot runs in this test process on the master side of a pty, so the test reads the wire itself.
"""

from __future__ import annotations

import json
import random
import threading
import time
from pathlib import Path

import pytest

from console.profile import load_profile
from console.protocol import Decoder, Flags, StopCommand, WheelCommand
from console.record import read_csv, sidecar_path
from console.sim.firmware import SimRobot
from console.sim.serve import PtyEnd, run_wall_clock
from tests.e2e.tmux_console import ROOT, TmuxConsole, tmux_missing_reason

pytestmark = pytest.mark.e2e

WREN = ROOT / "profiles" / "wren.toml"
TRIALS = 20
STOP_WAIT_S = 8.0
_reason = tmux_missing_reason()


class WireTap:
    """The robot's pty end, with every frame the console sent decoded and time-stamped."""

    def __init__(self) -> None:
        self.end = PtyEnd()
        self.url = self.path = self.end.path
        self.decoder = Decoder()
        self.frames: list[tuple[float, object]] = []
        self.lock = threading.Lock()

    def read(self) -> bytes:
        data = self.end.read()
        if data:
            now = time.monotonic()
            with self.lock:
                self.frames.extend((now, frame) for frame in self.decoder.feed(data))
        return data

    def write(self, data: bytes) -> None:
        self.end.write(data)

    def close(self) -> None:
        self.end.close()

    def since(self, t: float) -> list[object]:
        with self.lock:
            return [frame for when, frame in self.frames if when >= t]


def _trial(rng: random.Random, folder: Path, before_arming: bool) -> None:
    profile = load_profile(WREN)
    tap = WireTap()
    robot = SimRobot(profile, tap)
    stop = threading.Event()
    sim = threading.Thread(target=run_wall_clock, args=(robot, stop), daemon=True)
    sim.start()
    folder.mkdir()
    console = TmuxConsole([str(WREN), "--link", tap.path, "--mode", "latched", "--record"], cwd=folder)
    try:
        console.wait_for(r"I have read this|\by\b", 40.0)
        console.keys("y")
        console.wait_for(r"telemetry +≤ \d+ ms ago", 20.0)
        if before_arming:
            time.sleep(rng.uniform(0.0, 1.0))
        else:
            console.keys("a", "Enter")
            console.wait_for(r"(?<![A-Z])ARMED(?![A-Z])", 20.0)
            for _ in range(rng.randint(1, 8)):
                console.keys("Up")
            time.sleep(rng.uniform(0.0, 2.5))            # ramping, cruising, or anywhere in between
        killed_at = time.monotonic()
        console.close()                                  # the terminal goes away: kill-session, then the server
        deadline = killed_at + STOP_WAIT_S
        while time.monotonic() < deadline and not any(type(f) is StopCommand for f in tap.since(killed_at)):
            time.sleep(0.05)
        after = tap.since(killed_at)
        assert any(type(f) is StopCommand for f in after), f"no stop frame on the wire after the kill: {after[-5:]}"
        first_stop = next(i for i, f in enumerate(after) if type(f) is StopCommand)
        assert not any(type(f) is WheelCommand and (f.left or f.right) for f in after[first_stop:])
        time.sleep(1.0)                                  # the loop process closes the recording on its way out
        assert not robot.flags & Flags.WATCHDOG, "the robot was stopped by its own watchdog, not the console"
        records = list((folder / "recordings").glob("*.csv"))
        assert len(records) == 1 and sidecar_path(records[0]).exists(), "no recording sidecar"
        json.loads(sidecar_path(records[0]).read_text(encoding="utf-8"))
        states = read_csv(records[0])["state"]
        assert states[-1] == "stopped", states[-5:]
    finally:
        console.close()
        stop.set()
        sim.join()
        tap.close()


@pytest.mark.skipif(_reason is not None, reason=_reason or "")
def test_killing_the_terminal_at_random_moments_always_sends_the_stop_frame(tmp_path: Path) -> None:
    rng = random.Random(20261202)
    for trial in range(TRIALS):
        _trial(rng, tmp_path / f"trial-{trial:02d}", before_arming=trial % 5 == 0)
