"""The drive console in a real terminal (tmux): arm with the two-key sequence, drive with the arrow keys, stop with
the space bar, quit with q; what the operator would read is checked on the captured screen."""

from __future__ import annotations

import pytest

from tests.e2e.tmux_console import TmuxConsole, tmux_missing_reason

pytestmark = pytest.mark.e2e

_reason = tmux_missing_reason()


@pytest.mark.skipif(_reason is not None, reason=_reason or "")
def test_drive_arms_drives_and_stops_in_a_real_terminal() -> None:
    console = TmuxConsole(["profiles/wren.toml", "--mode", "latched", "--speed-step-mps", "0.05"])
    try:
        console.armed()                                       # telemetry first: arming is possible only then
        for _ in range(6):
            console.keys("Up")
        screen = console.wait_for(r"█ out \+0\.30")          # shaped speed reached the six nudges
        assert "▼ req +0.30" in screen
        console.keys("Space")
        console.wait_for(r"STOPP(ING|ED) — cause: operator")
        screen = console.wait_for(r"STOPPED — cause")            # (a loaded machine may add a watchdog trip)
        assert "█ out +0.00" in screen
        console.keys("Up")                                   # no motion after a stop until re-armed
        screen = console.wait_for(r"not armed")
        assert "█ out +0.00" in screen
        console.keys("q")
        assert console.wait_closed(), "the console did not exit on q"
    finally:
        console.close()


@pytest.mark.skipif(_reason is not None, reason=_reason or "")
def test_quit_while_moving_shows_stopping_until_at_rest_at_80x24() -> None:
    console = TmuxConsole(["profiles/wren.toml", "--mode", "latched"], size=(80, 24))
    try:
        console.armed()
        console.keys("9")
        console.wait_for(r"█\+0\.[5-9]\d")                      # well under way (narrow gauge)
        console.keys("q")
        screen = console.wait_for(r"STOPPING — cause: program end")   # the stop taken; the screen stays
        assert "stopping … quits at rest" in screen
        assert console.wait_closed(), "the console did not exit once at rest"
    finally:
        console.close()
