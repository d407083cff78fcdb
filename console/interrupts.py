"""Ctrl-C for the headless runs (`play`, `bench`): counted, never raised in the middle of a control cycle.

The run polls the count and answers it with a stop that escalates (controlled, then fast, then immediate), so an
interrupt always brings the robot to rest under control and keeps the recording.
"""

from __future__ import annotations

import signal
from types import FrameType


class Interrupts:
    """Counts SIGINT while installed; `restore()` puts the previous handler back."""

    def __init__(self) -> None:
        self.count = 0
        self._previous = signal.signal(signal.SIGINT, self._handle)

    def _handle(self, signum: int, frame: FrameType | None) -> None:
        self.count += 1

    def restore(self) -> None:
        signal.signal(signal.SIGINT, self._previous)
