"""SVG snapshots of the main screen (pytest-textual-snapshot) at a big and at the smallest supported terminal.

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
