"""A console on the simulated robot and a virtual clock: the loop advances only when a test says so, and the UI
ticks (snapshot in, heartbeat out) between chunks of loop time exactly as its timer would, so every run is the same.
"""

from __future__ import annotations

import io
from dataclasses import dataclass
from pathlib import Path

import pytest
from rich.console import Console

from console.core.step import Snapshot
from console.links import open_link
from console.loop import ControlLoop, VirtualClock
from console.profile import Profile, load_profile
from console.sim.firmware import SimRobot
from console.transport import MemoryTransport, memory_pair
from console.ui.app import DriveApp
from console.ui.driving import DriveMode, DriveSettings

PROFILES = Path(__file__).resolve().parents[3] / "profiles"
UI_TICK_S = 0.04          # the app's refresh period at 25 Hz
UI_TIMEOUT_S = 0.75       # as the drive verb sets it


@dataclass
class Rig:
    profile: Profile
    clock: VirtualClock
    loop: ControlLoop
    sim: SimRobot
    robot_end: MemoryTransport
    app: DriveApp

    @property
    def snap(self) -> Snapshot:
        return self.loop.snapshot()

    def advance(self, seconds: float, *, ui: bool = True) -> None:
        """Run the loop for `seconds` of virtual time; the UI ticks every 40 ms unless `ui` is False (a stall)."""
        cycles_per_tick = max(1, round(UI_TICK_S * self.profile.link.rate_hz))
        for _ in range(max(1, round(seconds / UI_TICK_S))):
            self.loop.run_cycles(cycles_per_tick)
            if ui:
                self.app.tick()


def make_rig(*, profile_name: str = "wren.toml", real_link: bool = False, mode: DriveMode = DriveMode.HOLD,
             deadman_s: float = 0.7, keepalive_s: float = 10.0) -> Rig:
    profile = load_profile(PROFILES / profile_name)
    console_end, robot_end = memory_pair()
    sim = SimRobot(profile, robot_end)
    clock = VirtualClock()
    loop = ControlLoop(profile, console_end, clock, sim=sim, ui_timeout_s=UI_TIMEOUT_S, url="sim",
                       operator_timeout_s=keepalive_s, reopen=lambda: open_link("sim", profile))
    settings = DriveSettings.for_envelope(profile.envelope, mode=mode, deadman_s=deadman_s, keepalive_s=keepalive_s)
    # the refresh timer is slowed right down: the test's own ticks (in virtual time) are the ones that count
    app = DriveApp(loop, profile, clock, settings, real_link=real_link, render_hz=1.0)
    return Rig(profile, clock, loop, sim, robot_end, app)


@pytest.fixture
def rig() -> Rig:
    return make_rig()


@pytest.fixture
def latched_rig() -> Rig:
    return make_rig(mode=DriveMode.LATCHED)


def screen_text(app: DriveApp) -> str:
    """The whole terminal as plain text, overlays and the screens beneath them composed as a person sees them."""
    width, height = app.size
    console = Console(width=width, height=height, file=io.StringIO(), record=True, legacy_windows=False,
                      safe_box=False, color_system=None)
    console.print(app.screen._compositor.render_update(full=True, screen_stack=app._background_screens))
    return console.export_text()
