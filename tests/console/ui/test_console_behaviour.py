"""Issue 11's console behaviours through Textual's Pilot on the simulated robot and a virtual clock: holding a key,
noticing its release, quitting while moving, the stop banner, the frame monitor, typed setpoints and the small things
(arming twice, steps, headings, events, SIGCONT)."""

from __future__ import annotations

import binascii
import os
import re
import signal

import pytest

from console.core.safety import SafetyState
from console.core.step import Event
from console.ui.driving import RELEASE_REPEATS, DriveMode
from console.ui.monitor import FrameList, MonitorScreen
from console.ui.screens import SetpointScreen
from shaping.shaper import StopKind
from tests.console.ui.conftest import Rig, make_rig, screen_text
from tests.console.ui.test_drive_app import arm, banner_text

SIZE = (120, 40)
REPEAT_S = 0.04      # a terminal's auto-repeat every 40 ms (25 per second), the rig's UI tick


async def _hold_up(rig: Rig, pilot, delay_s: float, repeats: int, *, watch: list[float] | None = None) -> None:
    """A held arrow: one press, the terminal's repeat delay, then `repeats` auto-repeats `REPEAT_S` apart.
    `watch` collects the speed request at every UI tick meanwhile."""
    await pilot.press("up")
    for _ in range(round(delay_s / REPEAT_S)):
        rig.advance(REPEAT_S)
        if watch is not None:
            watch.append(rig.snap.shaped.v_req_mps)
    for _ in range(repeats):
        await pilot.press("up")
        rig.advance(REPEAT_S)
        if watch is not None:
            watch.append(rig.snap.shaped.v_req_mps)


async def test_holding_an_arrow_drives_at_the_chosen_step_and_its_release_is_noticed_from_the_repeats(
        rig: Rig) -> None:
    drive = rig.app.drive
    async with rig.app.run_test(size=SIZE) as pilot:
        await arm(rig, pilot)
        await pilot.press("right_square_bracket")           # choose a coarser step: the speed a held arrow means
        chosen = drive.speed_step_mps
        await _hold_up(rig, pilot, 0.52, 15)
        assert rig.snap.shaped.v_req_mps == pytest.approx(chosen)     # 16 key events, one step: nothing added
        rig.advance(REPEAT_S)                                          # one repeat interval: still held
        assert rig.snap.shaped.v_req_mps == pytest.approx(chosen)
        rig.advance(RELEASE_REPEATS * REPEAT_S + REPEAT_S)             # a few intervals: released ...
        assert rig.snap.shaped.v_req_mps == 0.0
        assert RELEASE_REPEATS * REPEAT_S + 2 * REPEAT_S < drive.deadman_s   # ... long before the deadman time
        assert rig.snap.state is SafetyState.ARMED
        assert any("hold released" in text for _, text, _ in rig.app.drive_screen.event_log.lines)


async def test_a_repeat_delay_longer_than_the_deadman_time_does_not_make_every_start_stutter() -> None:
    rig = make_rig(deadman_s=0.5)
    async with rig.app.run_test(size=SIZE) as pilot:
        await arm(rig, pilot)
        first: list[float] = []
        await _hold_up(rig, pilot, 0.8, 8, watch=first)     # 0.8 s before the terminal repeats: the first start
        assert 0.0 in first                                  # lapses once (nothing was measured yet) ...
        rig.advance(1.0)
        assert rig.snap.shaped.v_req_mps == 0.0
        second: list[float] = []
        await _hold_up(rig, pilot, 0.8, 8, watch=second)    # ... every later one is held through the delay
        assert second == [pytest.approx(rig.app.drive.speed_step_mps)] * len(second)
        rig.advance(0.3)
        assert rig.snap.shaped.v_req_mps == 0.0


async def test_quit_while_moving_waits_for_rest_showing_stopping() -> None:
    rig = make_rig(mode=DriveMode.LATCHED)
    async with rig.app.run_test(size=SIZE) as pilot:
        await arm(rig, pilot)
        await pilot.press("8")
        rig.advance(2.0)
        await pilot.press("q")
        rig.advance(0.1)
        await pilot.pause()
        assert rig.app.return_code is None                   # still on screen while the robot ramps down
        assert rig.snap.state is SafetyState.STOPPING
        assert "stopping … quits at rest" in banner_text(rig.app)
        await pilot.press("a", "enter")                      # no arming while quitting
        states = []
        while rig.app.return_code is None and len(states) < 200:
            states.append(rig.snap.state)
            rig.advance(0.04)
        assert rig.app.return_code == 0
        assert rig.snap.state is SafetyState.STOPPED and abs(rig.snap.shaped.v_mps) < 1e-6
        assert SafetyState.ARMED not in states


async def test_a_second_quit_makes_a_fast_stop_and_quits_at_once() -> None:
    rig = make_rig(mode=DriveMode.LATCHED)
    async with rig.app.run_test(size=SIZE) as pilot:
        await arm(rig, pilot)
        await pilot.press("8")
        rig.advance(2.0)
        await pilot.press("q")
        rig.advance(0.1)
        assert rig.app.return_code is None
        await pilot.press("ctrl+c")                          # the same key as q
        await pilot.pause()
        assert rig.app.return_code == 0
        rig.loop.run_cycles(2)
        assert rig.snap.shaped.stopping is StopKind.FAST


async def test_quit_at_rest_is_at_once() -> None:
    rig = make_rig()
    async with rig.app.run_test(size=SIZE) as pilot:
        rig.advance(0.2)
        await pilot.press("q")
        await pilot.pause()
        assert rig.app.return_code == 0


async def test_a_fast_stop_offers_no_faster_stop(latched_rig: Rig) -> None:
    rig = latched_rig
    async with rig.app.run_test(size=SIZE) as pilot:
        await arm(rig, pilot)
        await pilot.press("8")
        rig.advance(2.0)
        await pilot.press("space")
        rig.advance(0.08)
        await pilot.pause()
        assert "x: faster" in banner_text(rig.app)
        await pilot.press("x")
        rig.advance(0.08)
        await pilot.pause()
        assert rig.snap.state is SafetyState.STOPPING
        assert "faster" not in banner_text(rig.app) and "fast stop" in banner_text(rig.app)


async def test_arming_twice_and_steps_at_their_end_say_nothing_misleading(rig: Rig) -> None:
    async with rig.app.run_test(size=SIZE) as pilot:
        await arm(rig, pilot)
        await pilot.press("a")
        rig.advance(0.04)
        notes = [text for _, text, kind in rig.app.drive_screen.event_log.lines if kind == "ui"]
        assert notes[-1] == "already armed" and not any("press enter" in n for n in notes[-1:])
        for _ in range(12):
            await pilot.press("right_square_bracket")
        after = len(rig.app.drive_screen.event_log.lines)
        await pilot.press("right_square_bracket", "right_square_bracket")
        assert len(rig.app.drive_screen.event_log.lines) == after        # at the end of the range: no event
        last = rig.app.drive_screen.event_log.lines[-1][1]
        assert last == f"steps {rig.app.drive.speed_step_mps:g} m/s, {rig.app.drive.turn_step_radps:g} rad/s"
        assert "0625" not in last


async def test_heading_starts_at_zero_and_events_name_their_kind_once(rig: Rig) -> None:
    async with rig.app.run_test(size=SIZE) as pilot:
        screen = rig.app.drive_screen
        screen.top_view.add((0.0, 0.0, -1e-9), "dead reckoning")   # a hair below zero: 0 degrees, not 360
        screen.event_log.add_loop((Event(1.0, "limit: speed clips the request", "limit"),))
        await pilot.pause()
        assert " 0° " in screen.top_view.text_lines()[0]
        text = screen_text(rig.app)
        assert "limit  speed clips the request" in text and "limit:" not in text
        assert "-0.00" not in text


async def test_sigcont_draws_the_whole_screen_again(rig: Rig, monkeypatch: pytest.MonkeyPatch) -> None:
    repaints = []
    async with rig.app.run_test(size=SIZE) as pilot:
        monkeypatch.setattr(rig.app, "repaint_all", lambda: repaints.append(1))
        os.kill(os.getpid(), signal.SIGCONT)
        await pilot.pause()
        await pilot.pause()
        assert repaints == [1]


def _telemetry_line(seq: int, echo: int) -> bytes:
    """A telemetry frame as PROTOCOL.md writes it, its CRC-16/CCITT-FALSE computed by the standard library's
    binascii.crc_hqx (init 0xFFFF; the catalogue check value of "123456789" is 0x29B1, asserted below)."""
    body = b"1 T %d %d +1.000 -1.000 10 20 12.00 0000" % (seq, echo)
    return b"@" + body + b"*%04X\n" % binascii.crc_hqx(body, 0xFFFF)


async def test_frame_monitor_shows_both_ways_decoded_and_raw_and_highlights_bad_lines(latched_rig: Rig) -> None:
    assert binascii.crc_hqx(b"123456789", 0xFFFF) == 0x29B1    # R. Williams' CRC catalogue, CRC-16/CCITT-FALSE
    rig = latched_rig
    good = _telemetry_line(9, 3)
    flipped = good.replace(b"+1.000", b"+1.001")                # one digit changed, trailer kept: a CRC error
    async with rig.app.run_test(size=SIZE) as pilot:
        await arm(rig, pilot)
        await pilot.press("f")
        rig.advance(0.2)
        rig.robot_end.write(good + flipped + b"@1 T 5 garbage*12\n")
        rig.advance(0.2)
        await pilot.pause()
        monitor = rig.app.screen
        assert isinstance(monitor, MonitorScreen)
        text = screen_text(rig.app)
        assert re.search(r"tx → ok +@1 W \d+ [+-]\d+\.\d{3} [+-]\d+\.\d{3}\*[0-9A-F]{4} +WheelCommand seq=", text)
        assert re.search(r"rx ← ok +@1 T 9 3 \+1\.000 -1\.000 .* +Telemetry seq=9 echo_seq=3 left=1\.0", text)
        assert re.search(r"rx ← CRC +@1 T 9 3 \+1\.001", text) and re.search(r"rx ← BAD +@1 T 5 garbage", text)
        assert "ARMED" in "\n".join(text.splitlines()[:3]) and re.search(r"space +stop", text.splitlines()[-1])
        frames = monitor.query_one(FrameList)
        bad_style = frames.style_of("frame--bad")
        rows = frames.paint(*frames.size).lines
        flagged = {run.strip() for row in rows for run, style in row if style == bad_style}
        assert {"CRC", "BAD"} <= flagged                         # highlighted: verdict and raw line alike
        assert any(run.startswith("@1 T 9 3 +1.001") for run in flagged)
        assert not any(run.startswith("@1 T 9 3 +1.000") for run in flagged)

        await pilot.press("p")                                   # paused: the list stands still
        shown = frames.lines
        rig.advance(0.3)
        await pilot.pause()
        assert frames.lines == shown and "PAUSED" in str(frames.border_subtitle)
        await pilot.press("p")
        rig.advance(0.1)
        await pilot.pause()
        assert frames.lines[-1].t_s > shown[-1].t_s
        await pilot.press("space")                               # the stop keys act above the monitor
        rig.advance(0.1)
        assert rig.snap.state in (SafetyState.STOPPING, SafetyState.STOPPED)
        await pilot.press("escape")
        assert rig.app.screen is rig.app.drive_screen


async def _type_setpoint(pilot, speed: str, turn: str) -> None:
    await pilot.press("s")
    await pilot.pause()
    await pilot.press(*speed)
    await pilot.press("tab", *turn, "enter")
    await pilot.pause()


async def test_a_typed_setpoint_is_clamped_to_the_envelope_and_shaped(latched_rig: Rig) -> None:
    rig = latched_rig
    envelope, limits = rig.profile.envelope, rig.profile.limits
    async with rig.app.run_test(size=SIZE) as pilot:
        await arm(rig, pilot)
        await _type_setpoint(pilot, "0.35", "0.5")
        rig.advance(0.04)
        s = rig.snap.shaped
        assert (s.v_req_mps, s.omega_req_radps) == (pytest.approx(0.35), pytest.approx(0.5))
        # shaped, not stepped: from rest a jerk-limited ramp covers at most j t^2 / 2 in t (constant jerk from zero
        # acceleration; e.g. Biagiotti and Melchiorri 2008, sec. 3.4)
        t = rig.snap.t_s - rig.app.drive_screen.event_log.lines[-1][0]
        assert 0.0 < s.v_mps <= limits.jerk_mps3 * (t + 0.02) ** 2 / 2.0 + 1e-9
        rig.advance(3.0)
        assert rig.snap.shaped.v_mps == pytest.approx(0.35, abs=1e-3)
        await _type_setpoint(pilot, "5", "")                    # beyond the top speed: clamped, turn rate kept
        rig.advance(0.04)
        s = rig.snap.shaped
        assert s.v_req_mps == pytest.approx(envelope.top_speed_mps) and s.omega_req_radps == pytest.approx(0.5)
        assert "clamped to the envelope" in rig.app.drive_screen.event_log.lines[-1][1]
        await pilot.press("s")
        await pilot.pause()
        await pilot.press("a", "b", "enter")                    # not a number: one line, the dialog stays
        await pilot.pause()
        assert isinstance(rig.app.screen, SetpointScreen)
        assert "speed: 'ab' is not a number" in screen_text(rig.app)
        await pilot.press("escape")
        assert rig.app.screen is rig.app.drive_screen


async def test_typed_setpoints_need_latched_mode(rig: Rig) -> None:
    async with rig.app.run_test(size=SIZE) as pilot:
        await arm(rig, pilot)
        await pilot.press("s")
        await pilot.pause()
        assert rig.app.screen is rig.app.drive_screen
        assert rig.app.drive_screen.event_log.lines[-1][1] == "typed setpoints need latched mode: m switches"


async def test_the_beat_alone_ends_a_released_hold_and_keeps_the_ui_heartbeat() -> None:
    """Panels refresh at 12.5 Hz; the hold release and the UI heartbeat ride the 20 Hz beat, so with no repaint at
    all a released key still brings the request to zero well within the deadman time, and the loop sees no UI
    stall."""
    rig = make_rig()
    async with rig.app.run_test(size=SIZE) as pilot:
        await arm(rig, pilot)
        await pilot.press("up")
        rig.advance(0.04)
        assert rig.snap.shaped.v_req_mps > 0.0
        beat_s = 0.05
        cycles = round(beat_s * rig.profile.link.rate_hz)
        for _ in range(round(rig.app.drive.deadman_s / beat_s)):     # beats only: no tick, no repaint
            rig.loop.run_cycles(cycles)
            rig.app.beat()
        rig.loop.run_cycles(cycles)
        assert rig.snap.shaped.v_req_mps == 0.0
        assert rig.snap.state is SafetyState.ARMED                   # released, not stopped by a UI stall
