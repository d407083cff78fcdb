"""The overlays: the help list (every binding, from console.ui.keys), the safety cautions before driving a real
robot, the typed setpoint and the frame monitor (console.ui.monitor).

Every overlay keeps the robot's safety state and the stop keys in view: a strip with the state (refreshed by the app's
tick like the main banner) on top, the stop keys' line at the bottom, whatever the overlay shows in between.
"""

from __future__ import annotations

import math
from typing import TypeVar

from rich.console import Group
from rich.table import Table
from rich.text import Text
from textual.app import ComposeResult
from textual.binding import Binding
from textual.containers import Horizontal, Vertical, VerticalScroll
from textual.screen import ModalScreen
from textual.widgets import Input, Static

from console.ui.keys import DRIVE_KEYS, STOPPING, KeyRow
from console.ui.widgets import HintBar, SafetyBanner

ResultType = TypeVar("ResultType")
STOP_KEYS = tuple((row.shown, row.short) for row in DRIVE_KEYS if row.group == STOPPING.description)

HELP_NOTES = (
    "Hold mode: a held key means \"go at the speed I chose\": an arrow drives at one step ([ and ] choose it), a "
    "digit at its preset; holding it does not add up. Most terminals send no key-release events, so holding works "
    "through the terminal's auto-repeat: the console measures the repeat and ends the hold a few repeat intervals "
    "after the last one (at most the deadman time, {deadman:.2f} s); then the request falls to zero and the shaper "
    "brings the robot to rest. It stays armed.",
    "Latched mode: the request stays until you change it or stop, as long as some key (k changes nothing) comes "
    "within the keep-alive time; the banner counts it down, and silence brings a controlled stop.",
    "The loop stops the robot by itself when the link or the telemetry goes quiet, the robot reports a watchdog trip "
    "or a fault, or this screen stops refreshing.",
    "A software stop is not an emergency stop. Keep the robot's hardware emergency stop within reach.",
)

CAUTIONS = (
    "You are about to drive a REAL robot over {url}.",
    "",
    "• A software stop is not a safety function. Keep the robot's hardware emergency stop within reach, and try it "
    "before you arm.",
    "• For bench tests, put the robot on blocks with its wheels off the ground.",
    "• Clear the space around it: people, cables, table edges, stairs.",
    "• Check the profile's limits and wheel polarity first (a wrong sign drives the other way).",
    "• The console stops the robot when the link, its telemetry or this screen goes quiet; when this computer fails, "
    "only the robot's own watchdog ({watchdog:.2f} s) stops it.",
    "• Most terminals send no key-release events: in hold mode a request outlives your key by a few auto-repeat "
    "intervals, up to {deadman:.2f} s (longer only before the first repeat of a press).",
)


def help_text(deadman_s: float, keys: list[KeyRow] = DRIVE_KEYS, help_notes: tuple[str, ...] = HELP_NOTES) -> Group:
    """The help overlay's content: a two-column table per group (descriptions wrap under themselves), then notes."""
    parts: list[Table | Text] = []
    for title in dict.fromkeys(row.group for row in keys):
        table = Table.grid(padding=(0, 2))
        table.add_column(no_wrap=True, style="bold", min_width=12)
        table.add_column(ratio=1)
        for row in keys:
            if row.group == title:
                table.add_row(row.keys, row.full)
        parts += [Text(title, style="bold underline"), table, Text("")]
    notes = Table.grid(padding=(0, 1))
    notes.add_column(no_wrap=True)
    notes.add_column(ratio=1)
    for note in help_notes:
        notes.add_row("•", note.format(deadman=deadman_s))
    parts.append(notes)
    return Group(*parts)


class Overlay(ModalScreen[ResultType]):
    """A screen above the drive screen that keeps the safety state (top) and the stop keys (bottom) in view.

    Subclasses yield their own content from `body()`; `close_key` names the key that closes the overlay on the stop
    line. The stop keys themselves are the app's priority bindings: they act here as everywhere.
    """

    close_key: tuple[str, str] = ("esc", "close")

    def compose(self) -> ComposeResult:
        yield SafetyBanner(id="overlay-banner")
        yield from self.body()
        yield HintBar((*STOP_KEYS, self.close_key), id="overlay-stops")

    def body(self) -> ComposeResult:
        raise NotImplementedError

    def on_mount(self) -> None:
        """The state strip is filled at once, not at the next refresh tick."""
        tick = getattr(self.app, "tick", None)
        if callable(tick):
            self.call_after_refresh(tick)

    def show_state(self, state: str, cause: str | None, detail: str) -> None:
        """The app's tick: the same words as the main banner (none while the overlay is being built or taken
        down: a tick can fall between those steps)."""
        for banner in self.query("#overlay-banner").results(SafetyBanner):
            banner.show(state, cause, detail)


class HelpScreen(Overlay[None]):
    """Every binding and the driving modes. The app's stop keys stay live above it (priority bindings)."""

    BINDINGS = [
        Binding("escape,question_mark,f1", "dismiss", "close help"),
    ]

    def __init__(self, deadman_s: float, keys: list[KeyRow] = DRIVE_KEYS,
                 help_notes: tuple[str, ...] = HELP_NOTES) -> None:
        super().__init__(id="help")
        self.deadman_s = deadman_s
        self.key_list = keys
        self.help_notes = help_notes

    def body(self) -> ComposeResult:
        with Vertical(id="help-box") as box:
            box.border_title = "keys and modes"
            box.border_subtitle = "escape closes"
            with VerticalScroll():
                yield Static(help_text(self.deadman_s, self.key_list, self.help_notes), id="help-text")


class CautionScreen(Overlay[bool]):
    """Shown before the first drive against a real link; `y` confirms, `q` (an app binding) quits."""

    BINDINGS = [Binding("y", "confirm", "I have read this")]
    close_key = ("y", "read, continue")

    def __init__(self, url: str, watchdog_s: float, deadman_s: float) -> None:
        super().__init__(id="cautions")
        self.url = url
        self.watchdog_s = watchdog_s
        self.deadman_s = deadman_s

    def body(self) -> ComposeResult:
        body = "\n".join(CAUTIONS).format(url=self.url, watchdog=self.watchdog_s, deadman=self.deadman_s)
        with Vertical(id="caution-box") as box:
            box.border_title = "before you drive"
            yield Static(body, id="caution-text")
            yield Static(Text.assemble(("  y  ", "bold reverse"), " I have read this, continue    ",
                                       ("  q  ", "bold reverse"), " quit"), id="caution-keys")

    def action_confirm(self) -> None:
        self.dismiss(True)


class SetpointScreen(Overlay[tuple[float, float]]):
    """Type an exact speed and turn rate; enter sends both (empty keeps the current value), escape cancels.

    The values go the way every request goes: clamped to the envelope's top speeds, then shaped by the loop (its
    envelope and jerk-limited ramps), so a typed setpoint is approached as smoothly as a key's.
    """

    BINDINGS = [Binding("escape", "dismiss", "cancel")]
    AUTO_FOCUS = "#setpoint-speed"
    close_key = ("⏎ / esc", "set / cancel")

    def __init__(self, current: tuple[float, float], speed_range: tuple[float, float], turn_max: float) -> None:
        super().__init__(id="setpoint")
        self.current = current
        self.speed_range = speed_range
        self.turn_max = turn_max

    def body(self) -> ComposeResult:
        (v, omega), (reverse, top) = self.current, self.speed_range
        with Vertical(id="setpoint-box") as box:
            box.border_title = "exact setpoint (latched)"
            with Horizontal():
                yield Static(f"speed m/s ({-reverse:+g}…{top:+g})", classes="setpoint-label")
                yield Input(placeholder=f"{v:+.3f}", id="setpoint-speed")
            with Horizontal():
                yield Static(f"turn rad/s (±{self.turn_max:g})", classes="setpoint-label")
                yield Input(placeholder=f"{omega:+.3f}", id="setpoint-turn")
            yield Static("enter sets both (empty keeps the value); shaped like every request", id="setpoint-error")

    def on_input_changed(self, event: Input.Changed) -> None:
        """Typing is the operator's presence (latched mode's keep-alive counts it)."""
        keepalive = getattr(self.app, "keepalive", None)
        if callable(keepalive):
            keepalive()

    def on_input_submitted(self, event: Input.Submitted) -> None:
        values = []
        for field, name, now in (("#setpoint-speed", "speed", self.current[0]),
                                 ("#setpoint-turn", "turn rate", self.current[1])):
            text = self.query_one(field, Input).value.strip()
            try:
                value = float(text) if text else now
            except ValueError:
                value = math.nan
            if not math.isfinite(value):
                self.query_one("#setpoint-error", Static).update(f"{name}: {text!r} is not a number")
                self.query_one(field, Input).focus()
                return
            values.append(value)
        self.dismiss((values[0], values[1]))
