"""The overlays: the help list (every binding, from console.ui.keys) and the safety cautions before driving a real
robot."""

from __future__ import annotations

from rich.console import Group
from rich.table import Table
from rich.text import Text
from textual.app import ComposeResult
from textual.binding import Binding
from textual.containers import Vertical, VerticalScroll
from textual.screen import ModalScreen
from textual.widgets import Static

from console.ui.keys import DRIVE_KEYS, KeyRow

HELP_NOTES = (
    "Hold mode: the request lives only while driving keys keep arriving. Most terminals send no key-release "
    "events, so holding a key works through the terminal's auto-repeat; with no driving key for the deadman time "
    "({deadman:.2f} s, longer than a typical 0.5 s auto-repeat delay) the request falls to zero and the shaper "
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
    "• Most terminals send no key-release events: in hold mode a request outlives your key by up to {deadman:.2f} s.",
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


class HelpScreen(ModalScreen[None]):
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

    def compose(self) -> ComposeResult:
        with Vertical(id="help-box") as box:
            box.border_title = "keys and modes"
            box.border_subtitle = "escape closes"
            with VerticalScroll():
                yield Static(help_text(self.deadman_s, self.key_list, self.help_notes), id="help-text")


class CautionScreen(ModalScreen[bool]):
    """Shown before the first drive against a real link; `y` confirms, `q` (an app binding) quits."""

    BINDINGS = [Binding("y", "confirm", "I have read this")]

    def __init__(self, url: str, watchdog_s: float, deadman_s: float) -> None:
        super().__init__(id="cautions")
        self.url = url
        self.watchdog_s = watchdog_s
        self.deadman_s = deadman_s

    def compose(self) -> ComposeResult:
        body = "\n".join(CAUTIONS).format(url=self.url, watchdog=self.watchdog_s, deadman=self.deadman_s)
        with Vertical(id="caution-box") as box:
            box.border_title = "before you drive"
            yield Static(body, id="caution-text")
            yield Static(Text.assemble(("  y  ", "bold reverse"), " I have read this, continue    ",
                                       ("  q  ", "bold reverse"), " quit"), id="caution-keys")

    def action_confirm(self) -> None:
        self.dismiss(True)
