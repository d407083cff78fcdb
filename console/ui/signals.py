"""SIGTERM and SIGHUP for the full-screen verbs (drive, bench --screen): the app exits with 128 + the signal and the
verb's own shutdown path then brings the robot to rest and closes the recording, exactly as for the quit key.

The handlers run on the app's asyncio event loop (`loop.add_signal_handler`), never inside a Python signal handler
that could interrupt a thread holding a lock the stop needs.
"""

from __future__ import annotations

import asyncio
import signal
from collections.abc import Callable

from textual.app import App

ENDING_SIGNALS = (signal.SIGTERM, signal.SIGHUP)


def exit_on_ending_signals(app: App[int], first: Callable[[int], None] | None = None) -> None:
    """Call from the app's on_mount: an ending signal sets `app.ended_by`, calls `first(signum)` (drive starts the
    stop there: a terminal that has gone away can keep the app from ever finishing its exit) and exits the app with
    128 + its number."""
    loop = asyncio.get_running_loop()
    for signum in ENDING_SIGNALS:
        loop.add_signal_handler(signum, _end, app, signum, first)


def _end(app: App[int], signum: int, first: Callable[[int], None] | None) -> None:
    if getattr(app, "ended_by", None) is None:
        app.ended_by = signum    # type: ignore[attr-defined]
        if first is not None:
            first(signum)
    app.exit(128 + signum)
