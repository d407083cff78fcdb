"""What every terminal size from 80x24 up keeps on screen, and what every overlay keeps above it (issue 11).

Checked on the composed terminal text (the screen as a person reads it, overlays included), so a panel that is
laid out but cut off or covered counts as missing.
"""

from __future__ import annotations

import re

import pytest

from console.core.safety import SafetyState
from console.ui.widgets import TracePlot
from tests.console.ui.conftest import Rig, make_rig, screen_text

SIZES = [(80, 24), (90, 30), (100, 34), (120, 40), (160, 50)]
PLOT_ROWS_MIN = 6
"""A braille plot needs about six rows to show a ramp's shape next to its request (common practice, our choice)."""


async def _driving(rig: Rig, pilot) -> None:
    """Armed, driving a left curve fast enough to put the right wheel near its bound, then a robot flag."""
    rig.advance(0.3)
    await pilot.press("a", "enter")
    rig.advance(0.1)
    await pilot.press("9", "left", "left", "left", "left")
    rig.advance(2.0)
    await pilot.pause()


def _essentials(text: str, rig: Rig) -> list[str]:
    """Names of the essentials that are not on the screen."""
    wanted = {
        "state": r"(?<![A-Z])ARMED(?![A-Z])",
        "link health": r"telemetry +≤ \d+ ms ago",
        "decoder errors": r"errors +none",
        "battery and flags row": r"battery +\d+\.\d V",
        "speed gauge": r"speed m/s .*█ ?(out )?[+-]\d\.\d\d",
        "turn gauge": r"turn rad/s .*█ ?(out )?[+-]\d\.\d\d",
        "left wheel with unit": r"(left|L) .*rad/s",
        "right wheel with unit": r"(right|R) .*rad/s",
        "controlled stop key": r"space +stop",
        "fast stop key": r"x +fast stop",
        "quit key": r"q +quit",
        "robot name": re.escape(rig.profile.name),
    }
    return [name for name, pattern in wanted.items() if not re.search(pattern, text)]


@pytest.mark.parametrize("size", SIZES, ids=[f"{w}x{h}" for w, h in SIZES])
async def test_every_size_keeps_the_essentials_and_shows_plots_only_when_readable(size: tuple[int, int]) -> None:
    rig = make_rig()
    async with rig.app.run_test(size=size) as pilot:
        await _driving(rig, pilot)
        text = screen_text(rig.app)
        assert rig.snap.state is SafetyState.ARMED
        assert _essentials(text, rig) == [], text
        plot = rig.app.drive_screen.query_one(TracePlot)
        if plot.display and plot.region.height:
            assert (plot.content_region.height - 1) // 2 >= PLOT_ROWS_MIN, text
        assert (plot.display and plot.region.height > 0) == (size[0] >= 100 and size[1] >= 40)
        rig.sim.set_fault(True)                 # a robot flag: named on the battery row at every size
        rig.advance(0.2)
        await pilot.pause()
        assert re.search(r"battery +\d+\.\d V +FAULT", screen_text(rig.app)), screen_text(rig.app)


@pytest.mark.parametrize("size", [(80, 24), (120, 40)], ids=["80x24", "120x40"])
async def test_the_help_overlay_keeps_the_state_and_the_stop_keys_in_view(size: tuple[int, int]) -> None:
    """Issue 11: with the help open over a moving robot, the state and the stop keys stay readable, and the state
    strip follows the robot (a stop pressed above the overlay shows there)."""
    rig = make_rig()
    async with rig.app.run_test(size=size) as pilot:
        await _driving(rig, pilot)
        await pilot.press("question_mark")
        rig.advance(0.1)
        await pilot.pause()
        lines = screen_text(rig.app).splitlines()
        assert "keys and modes" in "\n".join(lines)                       # the help is open
        top, bottom = "\n".join(lines[:3]), lines[-1]
        assert re.search(r"(?<![A-Z])ARMED(?![A-Z])", top) and "HOLD" in top, top
        assert re.search(r"space +stop +x +fast stop +q +quit", bottom), bottom
        await pilot.press("space")
        rig.advance(0.1)
        await pilot.pause()
        top = "\n".join(screen_text(rig.app).splitlines()[:3])
        assert re.search(r"STOPP(ING|ED) — cause: operator", top), top
        assert "keys and modes" in screen_text(rig.app)                  # the help is still open
