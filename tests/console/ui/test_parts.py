"""The console's pure parts: the braille canvas, the large-type font and the key state machine."""

from __future__ import annotations

import numpy as np
import pytest

from console.profile import load_profile
from console.ui.bigtext import big_lines
from console.ui.braille import BrailleCanvas
from console.ui.driving import Confirm, DriveInput, DriveMode, DriveSettings
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
    for _ in range(100):
        drive.nudge(-1, 1, 0.0)
    assert drive.request == (-envelope.top_reverse_speed_mps, envelope.top_turn_rate_radps)
    assert drive.preset(0.5, 0.0)[0] == pytest.approx(-0.5 * envelope.top_reverse_speed_mps)   # reversing: reverse
    drive.zero_speed(0.0)
    assert drive.preset(0.5, 0.0)[0] == pytest.approx(0.5 * envelope.top_speed_mps)


def test_nudging_back_lands_exactly_on_zero(drive: DriveInput) -> None:
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
