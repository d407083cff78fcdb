"""The console's pure parts: the braille canvas, the large-type font and the key state machine."""

from __future__ import annotations

import numpy as np
import pytest

from console.profile import load_profile
from console.ui.bigtext import big_lines
from console.ui.braille import BrailleCanvas
from console.ui.driving import Confirm, DriveInput, DriveMode, DriveSettings, KeyRepeat, step_in_series
from console.ui.widgets import signed
from tests.console.ui.conftest import PROFILES


def _chars(canvas: BrailleCanvas) -> list[str]:
    return ["".join(text for text, _ in row) for row in canvas.to_rows({})]


def test_braille_dots_follow_the_unicode_numbering() -> None:
    # Unicode Standard, Braille Patterns block U+2800-U+28FF: dot n sets bit n-1; dots 1-3 and 7 are the left
    # column top to bottom, 4-6 and 8 the right column.
    canvas = BrailleCanvas(1, 1)
    canvas.points(np.array([0.0]), np.array([0.0]), 1)
    assert _chars(canvas) == ["\u2801"]                 # dot 1
    canvas.points(np.array([1.0]), np.array([3.0]), 1)
    assert _chars(canvas) == ["\u2881"]                 # dots 1 and 8
    full = BrailleCanvas(1, 1)
    full.points(np.repeat([0.0, 1.0], 4), np.tile([0.0, 1.0, 2.0, 3.0], 2), 1)
    assert _chars(full) == ["\u28ff"]                   # all eight dots


def test_polyline_is_unbroken_and_ignores_nan_and_off_canvas_points() -> None:
    canvas = BrailleCanvas(10, 3)
    canvas.polyline(np.array([0.0, 19.0, np.nan, 5.0]), np.array([0.0, 11.0, 3.0, 500.0]), 1)
    lit = np.argwhere(canvas.dots > 0)
    assert {(0, 0), (11, 19)} <= {tuple(p) for p in lit}
    columns = sorted(set(lit[:, 1]))
    assert columns == list(range(20))                   # every column between the ends has a dot: no gaps


def test_big_type_is_three_rows_of_half_blocks() -> None:
    for word in ("DISARMED", "ARMED", "STOPPING", "STOPPED"):
        lines = big_lines(word)
        assert len(lines) == 3 and len({len(line) for line in lines}) == 1
        assert set("".join(lines)) <= set(" ▀▄█")
    with pytest.raises(KeyError):
        big_lines("Q")


@pytest.fixture
def drive() -> DriveInput:
    envelope = load_profile(PROFILES / "wren.toml").envelope
    return DriveInput(envelope, DriveSettings.for_envelope(envelope, deadman_s=0.7))


def test_requests_stay_inside_the_envelope(drive: DriveInput) -> None:
    envelope = drive.envelope
    drive.toggle_mode()                                  # latched: nudges add up (hold mode sets one step)
    for _ in range(100):
        drive.nudge(-1, 1, 0.0)
    assert drive.request == (-envelope.top_reverse_speed_mps, envelope.top_turn_rate_radps)
    assert drive.preset(0.5, 0.0)[0] == pytest.approx(-0.5 * envelope.top_reverse_speed_mps)   # reversing: reverse
    drive.zero_speed(0.0)
    assert drive.preset(0.5, 0.0)[0] == pytest.approx(0.5 * envelope.top_speed_mps)


def test_nudging_back_lands_exactly_on_zero(drive: DriveInput) -> None:
    drive.toggle_mode()
    for _ in range(7):
        drive.nudge(1, 1, 0.0)
    for _ in range(7):
        drive.nudge(-1, -1, 0.0)
    assert drive.request == (0.0, 0.0)


def test_hold_expires_once_after_the_deadman_time_and_latched_never(drive: DriveInput) -> None:
    drive.nudge(2, 0, 10.0)
    assert not drive.expire(10.69)
    assert drive.hold_left_s(10.5) == pytest.approx(0.2)
    assert drive.expire(10.71) and drive.request == (0.0, 0.0)
    assert not drive.expire(11.0)                       # reported once
    drive.toggle_mode()
    assert drive.mode is DriveMode.LATCHED and drive.request == (0.0, 0.0)
    drive.nudge(2, 0, 20.0)
    assert not drive.expire(100.0) and drive.request[0] > 0.0


def test_arming_window(drive: DriveInput) -> None:
    assert not drive.confirm(Confirm.ARM, 0.0)
    drive.open_window(Confirm.ARM, 1.0)
    assert drive.window_pending(Confirm.ARM, 2.9) and not drive.window_pending(Confirm.ARM, 3.1)
    assert not drive.confirm(Confirm.ARM, 3.1)
    drive.open_window(Confirm.ARM, 5.0)
    assert not drive.confirm(Confirm.RECONNECT, 5.5)     # a window is for one purpose
    assert drive.confirm(Confirm.ARM, 6.0)
    assert not drive.confirm(Confirm.ARM, 6.1)          # one confirm per window


def test_hold_mode_sets_one_step_per_axis_instead_of_adding(drive: DriveInput) -> None:
    for t in range(20):
        drive.nudge(1, 0, t * 0.03)
    assert drive.request == (pytest.approx(drive.speed_step_mps), 0.0)
    drive.nudge(0, -1, 1.0)                             # the other axis joins; the speed stays
    assert drive.request == (pytest.approx(drive.speed_step_mps), pytest.approx(-drive.turn_step_radps))
    drive.nudge(-1, 0, 1.1)
    assert drive.request[0] == pytest.approx(-drive.speed_step_mps)


def test_key_repeat_is_measured_and_ends_a_hold_a_few_intervals_after_the_last_repeat() -> None:
    repeat = KeyRepeat()
    assert repeat.release_after_s(0.7) == 0.7          # nothing measured: the configured time
    times = [0.0, 0.55] + [0.55 + 0.033 * k for k in range(1, 10)]   # delay 0.55 s, then 30 repeats a second
    for t in times:
        repeat.key("up", t)
    assert repeat.delay_s == pytest.approx(0.55)
    assert repeat.interval_s == pytest.approx(0.033)
    assert repeat.release_after_s(0.7) == pytest.approx(0.1)          # 3 intervals, never under 0.1 s
    repeat.key("left", 2.0)                                           # a fresh press of another key
    assert not repeat.repeating
    assert repeat.release_after_s(0.7) == pytest.approx(0.7)          # its first repeat is 0.55 s away
    assert repeat.release_after_s(0.4) == pytest.approx(0.55 + 0.1)   # a delay over the deadman time is waited for
    repeat.key("left", 2.0 + 0.2)                                     # jitter: one slow repeat
    assert repeat.release_after_s(0.7) == pytest.approx(0.6)          # 3 x the longest recent gap
    assert repeat.release_after_s(0.3) == pytest.approx(0.3)          # the configured time bounds it


def test_steps_walk_the_one_two_five_series() -> None:
    assert [step_in_series(0.05, True), step_in_series(0.05, False)] == [0.1, 0.02]
    assert [step_in_series(0.06, True), step_in_series(0.06, False)] == [0.1, 0.05]
    assert [step_in_series(0.2, True), step_in_series(1.0, False)] == [0.5, 0.5]


def test_steps_stay_round_and_report_the_end_of_their_range(drive: DriveInput) -> None:
    top = drive.envelope.top_speed_mps
    seen = []
    while drive.scale_steps(True):
        seen.append(drive.speed_step_mps)
    assert seen and max(seen) <= top / 2.0 and not drive.scale_steps(True)
    while drive.scale_steps(False):
        seen.append(drive.speed_step_mps)
    assert min(seen) >= top / 100.0 - 1e-12
    for step in seen:                                  # every one reads as 1, 2 or 5 times a power of ten
        mantissa = f"{step:e}".split("e")[0].rstrip("0").rstrip(".")
        assert mantissa in {"1", "2", "5"}, step


def test_no_negative_zero() -> None:
    assert signed(-0.0004) == "+0.00" and signed(-0.006) == "-0.01" and signed(-0.0) == "+0.00"
