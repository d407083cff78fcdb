"""Ctrl-C, SIGTERM and SIGHUP for the verbs that move a robot: counted, never raised in the middle of a control cycle.

The run polls the count and answers it with a stop that escalates (controlled, then fast, then immediate), so any of
them - Ctrl-C, `timeout`, a cancelled job, a dropped ssh session - brings the robot to rest under control and keeps
the recording with its sidecar. The exit code is then 128 + the first signal's number (130 Ctrl-C, 143 SIGTERM,
129 SIGHUP), as shells report a process ended by that signal: the run did not complete.
"""

from __future__ import annotations

import signal
from types import FrameType
from typing import Any

from console.core.safety import StopCause

STOP_SIGNALS = (signal.SIGINT, signal.SIGTERM, signal.SIGHUP)


class Interrupts:
    """Counts SIGINT, SIGTERM and SIGHUP while installed; `restore()` puts the previous handlers back."""

    def __init__(self) -> None:
        self.count = 0
        self.first: int | None = None
        self._previous: dict[int, Any] = {signum: signal.signal(signum, self._handle) for signum in STOP_SIGNALS}

    def _handle(self, signum: int, frame: FrameType | None) -> None:
        self.count += 1
        if self.first is None:
            self.first = signum

    @property
    def exit_code(self) -> int:
        """128 + the first signal (0 when none came)."""
        return 0 if self.first is None else 128 + self.first

    @property
    def cause(self) -> StopCause:
        """The stop cause the first signal stands for: the operator's Ctrl-C, or a signal from outside."""
        return StopCause.OPERATOR if self.first in (None, signal.SIGINT) else StopCause.SIGNAL

    @property
    def name(self) -> str:
        return "Ctrl-C" if self.first in (None, signal.SIGINT) else signal.Signals(self.first).name

    def restore(self) -> None:
        for signum, handler in self._previous.items():
            signal.signal(signum, handler)
