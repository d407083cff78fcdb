"""SVG snapshots of the replay screen (pytest-textual-snapshot) at a stop event, at a big and at the smallest supported
terminal. The recording is the scene of conftest.py (virtual clock, seeded simulated robot), so the picture is the
same on every run. Update with `pytest tests/console/replay/test_replay_snapshots.py --snapshot-update` after a
deliberate change, and look at them.
"""

from __future__ import annotations

from pathlib import Path

from console.replay import open_replay
from console.ui.replay import ReplayApp
from tests.console.replay.conftest import SCENE


def _app(path: Path) -> ReplayApp:
    # the fault stop: banner STOPPED with its cause, the fault and both stops on the position bar
    return ReplayApp(open_replay(path), at_s=SCENE.fault_s + 0.3, render_hz=1.0, clock=lambda: 0.0)


def test_replay_screen_120x40(snap_compare, scene_recording: Path) -> None:
    assert snap_compare(_app(scene_recording), terminal_size=(120, 40))


def test_replay_screen_80x24(snap_compare, scene_recording: Path) -> None:
    assert snap_compare(_app(scene_recording), terminal_size=(80, 24))
