"""One registry of link URL schemes: how a link URL becomes the console's byte link.

A scheme is a prefix and an opener; `open_link(url, profile)` picks the first whose prefix matches, and pyserial
(device paths, socket://, rfc2217://, loop:// and its other URL handlers) takes the rest. The simulated robot is a
scheme of its own ("sim"): its opener returns the robot with the link, and the runner - never the loop core - advances
it with the loop's clock. `trace+URL` opens URL and logs every chunk of bytes both ways, time-stamped, to
recordings/wire-<UTC time>.log (modelled on pyserial's spy:// handler, for any link including "sim"). Adding a scheme
is one opener and one `SCHEMES` entry here (see DEVELOPERS.md).
"""

from __future__ import annotations

import time
from collections.abc import Callable
from dataclasses import dataclass
from datetime import UTC, datetime
from pathlib import Path
from typing import TYPE_CHECKING

from console.transport import Transport, memory_pair, open_url

if TYPE_CHECKING:
    from console.profile import Profile
    from console.sim.firmware import SimRobot

SIM = "sim"
TRACE = "trace+"


@dataclass(slots=True)
class Link:
    """An open link: the console's transport and, for the simulated robot, the robot the runner advances."""

    url: str
    transport: Transport
    sim: SimRobot | None = None


def _open_sim(url: str, profile: Profile) -> Link:
    from console.sim.firmware import SimRobot

    console_end, robot_end = memory_pair(SIM)
    return Link(url, console_end, SimRobot(profile, robot_end))


def _open_serial(url: str, profile: Profile) -> Link:
    return Link(url, open_url(url, profile.link.baud))


class WireLog:
    """A transport that logs every chunk written (">") and read ("<") with its `time.perf_counter` time, as Python
    bytes literals (one line each: a chunk may hold part of a frame or several). The log is buffered and written out
    on close, so a cycle costs no extra system call."""

    def __init__(self, inner: Transport, path: Path) -> None:
        self.inner = inner
        self.url = inner.url
        self.path = path
        path.parent.mkdir(parents=True, exist_ok=True)
        self._file = open(path, "w", encoding="ascii", buffering=1 << 20)   # closed in close()
        self._file.write(f"# diffdeck wire log of {inner.url}; time.perf_counter s, > to the robot, < from it\n")

    def write(self, data: bytes) -> None:
        self.inner.write(data)
        self._file.write(f"{time.perf_counter():.6f} > {data!r}\n")

    def read(self) -> bytes:
        data = self.inner.read()
        if data:
            self._file.write(f"{time.perf_counter():.6f} < {data!r}\n")
        return data

    def close(self) -> None:
        try:
            self.inner.close()
        finally:
            self._file.close()


def _open_traced(url: str, profile: Profile) -> Link:
    link = open_link(url.removeprefix(TRACE), profile)
    stamp = datetime.now(UTC).strftime("%Y%m%dT%H%M%S.%fZ")
    link.transport = WireLog(link.transport, Path("recordings") / f"wire-{stamp}.log")
    return link


SCHEMES: dict[str, Callable[[str, Profile], Link]] = {SIM: _open_sim, TRACE: _open_traced}
"""Exact URL or prefix -> opener; anything else goes to pyserial."""


def is_simulated(url: str) -> bool:
    """The URL names the in-process simulated robot (virtual clock allowed, true pose recorded, no cautions)."""
    return url.removeprefix(TRACE) == SIM


def open_link(url: str, profile: Profile) -> Link:
    """Open `url` (InputError for a URL no scheme takes, LinkLost when the link cannot be opened)."""
    for prefix, opener in SCHEMES.items():
        if url == prefix or url.startswith(prefix if prefix.endswith("+") else prefix + "://"):
            return opener(url, profile)
    return _open_serial(url, profile)
