"""The drive console with an input source (`drive --input`), through Textual's Pilot on the simulated robot and a
virtual clock: the input panel shows what the source reports, the terminal's driving keys are off while a device
drives, and the terminal's stop keys still stop."""

from __future__ import annotations

from dataclasses import dataclass

from console.core.safety import SafetyState, StopCause
from console.inputs.source import InputStatus
from console.links import open_link
from console.loop import ControlLoop, VirtualClock
from console.profile import load_profile
from console.session import LoopHandle
from console.sim.firmware import SimRobot
from console.transport import memory_pair
from console.ui.app import DriveApp
from console.ui.driving import DriveSettings
from console.ui.input_panel import InputPanel, stick_bar
from tests.console.ui.conftest import PROFILES, UI_TIMEOUT_S, Rig, make_rig
from tests.console.ui.test_drive_app import SIZE, arm, banner_text

SPEED_MPS = 0.2


@dataclass
class FakePad:
    """A scripted source: the test sets what the operator holds; it drives as a pad would, only while armed."""

    held: bool = False
    stick: float = 0.0
    lost: str | None = None

    def poll(self, t_s: float, loop: LoopHandle) -> InputStatus:
        armed = loop.snapshot().state is SafetyState.ARMED
        loop.request(SPEED_MPS * self.stick if armed and self.held else 0.0, 0.0)
        detail = "held: driving" if self.held else "released: hold BTN_TL to drive"
        return InputStatus("gamepad /dev/input/event7", detail, "gamepad", "BTN_TL", self.held, self.stick, 0.0, 0.3,
                           False, self.lost)


def pad_rig(pad: FakePad) -> Rig:
    profile = load_profile(PROFILES / "wren.toml")
    console_end, robot_end = memory_pair()
    sim = SimRobot(profile, robot_end)
    clock = VirtualClock()
    loop = ControlLoop(profile, console_end, clock, sim=sim, ui_timeout_s=UI_TIMEOUT_S, url="sim",
                       reopen=lambda: open_link("sim", profile), source=pad)
    app = DriveApp(loop, profile, clock, DriveSettings.for_envelope(profile.envelope), real_link=False,
                   render_hz=1.0)
    return Rig(profile, clock, loop, sim, robot_end, app)


def panel_text(rig: Rig) -> str:
    return "\n".join(rig.app.drive_screen.query_one(InputPanel).text_lines())


async def test_the_panel_shows_enable_sticks_and_setting_and_the_terminal_keys_do_not_drive() -> None:
    pad = FakePad()
    rig = pad_rig(pad)
    async with rig.app.run_test(size=SIZE) as pilot:
        await arm(rig, pilot)
        await pilot.pause()
        panel = rig.app.drive_screen.query_one(InputPanel)
        assert panel.display
        text = panel_text(rig)
        assert "gamepad /dev/input/event7" in text and "RELEASED" in text and "hold BTN_TL" in text
        assert "full stick = 30% of top" in text
        assert "hold BTN_TL to drive" in banner_text(rig.app)   # not the terminal's "keep a key down"
        await pilot.press("up", "up", "8")                  # the terminal's driving keys: nothing
        rig.advance(0.2)
        assert rig.snap.shaped.v_req_mps == 0.0 and rig.app.drive.request == (0.0, 0.0)
        assert "terminal: arm and stop keys only" in panel_text(rig)
        pad.held, pad.stick = True, 1.0
        rig.advance(0.2)
        assert rig.snap.shaped.v_req_mps == SPEED_MPS
        text = panel_text(rig)
        assert "ENABLE HELD" in text and "+1.00" in text
        await pilot.press("space")                          # the terminal's stop key stops whatever drives
        rig.advance(0.04)
        assert rig.snap.state is SafetyState.STOPPING and rig.snap.cause is StopCause.OPERATOR
        pad.lost = "end of file"
        rig.advance(0.04)
        assert "INPUT LOST · end of file" in panel_text(rig)


async def test_without_a_source_the_panel_is_hidden() -> None:
    rig = make_rig()
    async with rig.app.run_test(size=SIZE):
        rig.advance(0.2)
        assert not rig.app.drive_screen.query_one(InputPanel).display


def test_the_stick_bar_puts_the_marker_at_the_ends_and_the_centre() -> None:
    assert stick_bar(-1.0, 9) == "●───┼────"
    assert stick_bar(0.0, 9) == "────●────"
    assert stick_bar(1.0, 9) == "────┼───●"
    assert stick_bar(0.5, 10) == "────┼─●──"          # an even width: one cell less, the centre its own cell


async def test_on_a_short_screen_the_panel_keeps_the_enable_and_the_sticks() -> None:
    pad = FakePad(held=True, stick=0.5)
    rig = pad_rig(pad)
    async with rig.app.run_test(size=(80, 24)) as pilot:
        await arm(rig, pilot)
        rig.advance(0.1)
        await pilot.pause()
        lines = rig.app.drive_screen.query_one(InputPanel).text_lines()
        assert lines[0].startswith("ENABLE HELD") and "speed +0.50" in lines[1] and "30%" in lines[1]
