"""What went out on the wire, from the `trace+` link scheme's log (console/links.py WireLog): the time of every
wheel-command frame whose rates differ from the frame before. Latency benchmarks compare these times with the moment
they made the change (a key sent to the terminal, an input event written, a request): both are `time.perf_counter`
(CLOCK_MONOTONIC on Linux, shared by every process)."""

from __future__ import annotations

import ast
from pathlib import Path

from console.links import WireLog
from console.transport import Transport


def wire_log(folder: Path) -> Path:
    """The one wire log a `trace+` link opened with `folder` as its working directory wrote."""
    logs = sorted((folder / "recordings").glob("wire-*.log"))
    if len(logs) != 1:
        raise RuntimeError(f"expected one wire log under {folder / 'recordings'}, found {len(logs)}")
    return logs[0]


def traced(transport: Transport, folder: Path) -> WireLog:
    """An in-process link logged exactly as `trace+` logs it (for a loop built around a transport by hand)."""
    return WireLog(transport, folder / "recordings" / "wire-in-process.log")


def wheel_frame_changes(log: Path) -> list[tuple[float, str]]:
    """(time, "left right") of each wheel-command frame (`@1 W seq left right*crc`) whose rates changed."""
    changes: list[tuple[float, str]] = []
    last: bytes | None = None
    for line in log.read_text(encoding="ascii").splitlines():
        if line.startswith("#"):
            continue
        t, direction, literal = line.split(" ", 2)
        if direction != ">":
            continue
        for frame in ast.literal_eval(literal).split(b"\n"):
            fields = frame.split(b"*", 1)[0].split(b" ")
            if len(fields) == 5 and fields[1] == b"W":
                rates = fields[3] + b" " + fields[4]
                if rates != last:
                    last = rates
                    changes.append((float(t), rates.decode("ascii")))
    return changes
