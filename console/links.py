"""One registry of link URL schemes: how a link URL becomes the console's byte link.

A scheme is a prefix and an opener; `open_link(url, profile)` picks the first whose prefix matches, and pyserial
(device paths, socket://, rfc2217://, loop:// and its other URL handlers) takes the rest. The simulated robot is a
scheme of its own ("sim"): its opener returns the robot with the link, and the runner - never the loop core - advances
it with the loop's clock. Adding a scheme is one opener and one `SCHEMES` entry here (see DEVELOPERS.md).
"""

from __future__ import annotations

from collections.abc import Callable
from dataclasses import dataclass
from typing import TYPE_CHECKING

from console.transport import Transport, memory_pair, open_url

if TYPE_CHECKING:
    from console.profile import Profile
    from console.sim.firmware import SimRobot

SIM = "sim"


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


SCHEMES: dict[str, Callable[[str, Profile], Link]] = {SIM: _open_sim}
"""Exact URL or prefix -> opener; anything else goes to pyserial."""


def is_simulated(url: str) -> bool:
    """The URL names the in-process simulated robot (virtual clock allowed, true pose recorded, no cautions)."""
    return url == SIM


def open_link(url: str, profile: Profile) -> Link:
    """Open `url` (InputError for a URL no scheme takes, LinkLost when the link cannot be opened)."""
    for prefix, opener in SCHEMES.items():
        if url == prefix or url.startswith(prefix + "://"):
            return opener(url, profile)
    return _open_serial(url, profile)
