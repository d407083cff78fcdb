"""SVG snapshots of the main screen (pytest-textual-snapshot) at 80x24 (the smallest supported), 100x34 and 120x40,
and of the help overlay above a moving robot at 80x24.

The scene is deterministic: virtual clock, seeded simulated robot, scripted keys. Update with
`pytest tests/console/ui/test_drive_snapshots.py --snapshot-update` after a deliberate change, and look at them.
"""

from __future__ import annotations

from console.ui.driving import DriveMode
from tests.console.ui.conftest import make_rig


def _scene(terminal_size: tuple[int, int]):
    rig = make_rig(mode=DriveMode.LATCHED)

    async def run_before(pilot) -> None:
        rig.advance(0.4)
        await pilot.press("a", "enter")
        rig.advance(0.2)
        await pilot.press("6", "left", "left", "left")
        rig.advance(3.0)
        await pilot.press("right", "right", "right", "right", "right", "right")
        rig.advance(2.0)
        await pilot.pause()

    return rig.app, run_before


def test_main_screen_120x40(snap_compare) -> None:
    app, run_before = _scene((120, 40))
    assert snap_compare(app, terminal_size=(120, 40), run_before=run_before)


def test_main_screen_80x24(snap_compare) -> None:
    app, run_before = _scene((80, 24))
    assert snap_compare(app, terminal_size=(80, 24), run_before=run_before)


def test_main_screen_100x34(snap_compare) -> None:
    app, run_before = _scene((100, 34))
    assert snap_compare(app, terminal_size=(100, 34), run_before=run_before)


def test_help_over_the_moving_robot_80x24(snap_compare) -> None:
    """The help overlay at the smallest size: the state strip above it and the stop keys beneath stay in view."""
    app, scene = _scene((80, 24))

    async def run_before(pilot) -> None:
        await scene(pilot)
        await pilot.press("question_mark")
        await pilot.pause()

    assert snap_compare(app, terminal_size=(80, 24), run_before=run_before)
