"""Every key of the drive console, once. The Textual bindings carry the words the screen shows, so the hint bar, the
key card and the help overlay cannot disagree with what the keys do.

Per binding: `description` is the short text (hint bar, key card), `tooltip` the full one (help overlay),
`key_display` how the key is written on the bar and the card; bindings sharing a `key_display` form one row (up and
down: "↑↓"), described by the first of them. `show` puts the row in the hint bar; `group` is its help heading.
"""

from __future__ import annotations

from collections.abc import Iterable
from dataclasses import dataclass

from textual.binding import Binding, BindingType

STOPPING = Binding.Group("Stopping — these work in every state and on every screen, this one included")
ARMING = Binding.Group("Arming and the link")
DRIVING = Binding.Group("Driving (armed only)")
MODES = Binding.Group("Modes and view")

APP_BINDINGS: list[BindingType] = [
    Binding("space", "stop('controlled')", "stop", key_display="space", priority=True, group=STOPPING,
            tooltip="controlled stop: both axes ramp down within the normal limits, then hold zero"),
    Binding("x", "stop('fast')", "fast stop", key_display="x", priority=True, group=STOPPING,
            tooltip="fast stop: ramp down with the profile's stop deceleration and stop jerk"),
    Binding("q,ctrl+c", "quit_console", "quit", key_display="q", priority=True, group=STOPPING,
            tooltip="controlled stop, then quit once at rest (the banner says \"stopping …\"); q again: fast stop "
                    "and quit at once"),
]
"""App-level priority bindings: they act in every state and above every overlay."""

SCREEN_BINDINGS: list[BindingType] = [
    Binding("a", "arm_open", "arm", key_display="a ⏎", group=ARMING,
            tooltip="a opens the arming window (2 s): nothing moves yet; enter inside it arms. The request starts "
                    "at zero; after any stop, arm again"),
    Binding("enter", "arm_confirm", "arm", key_display="a ⏎", show=False, group=ARMING),
    Binding("r", "reconnect_open", "reconnect", key_display="r ⏎", show=False, group=ARMING,
            tooltip="after a link loss: reopen the same link (enter within 2 s confirms); arm again afterwards"),
    Binding("up", "nudge(1, 0)", "speed", key_display="↑↓", group=DRIVING,
            tooltip="latched: speed request + / − one step; hold: forward / reverse at one step while held"),
    Binding("down", "nudge(-1, 0)", "speed", key_display="↑↓", group=DRIVING),
    Binding("left", "nudge(0, 1)", "turn", key_display="←→", group=DRIVING,
            tooltip="turn rate left (counter-clockwise) / right: latched + / − one step; hold: one step while held"),
    Binding("right", "nudge(0, -1)", "turn", key_display="←→", group=DRIVING),
    *(Binding(str(n), f"preset({n})", "preset", key_display="1-9", group=DRIVING,
              tooltip="speed preset: 10 % … 90 % of the envelope's top speed (reverse if reversing)")
      for n in range(1, 10)),
    Binding("0", "zero('speed')", "zero", key_display="0 c z", show=False, group=DRIVING,
            tooltip="0: speed request to zero (turn rate kept); c: turn-rate request to zero (speed kept); z: both"),
    Binding("c", "zero('turn')", "zero", key_display="0 c z", show=False, group=DRIVING),
    Binding("z", "zero('both')", "zero", key_display="0 c z", show=False, group=DRIVING),
    Binding("left_square_bracket", "steps(False)", "steps", key_display="[ ]", show=False, group=DRIVING,
            tooltip="finer / coarser steps, along 0.01 0.02 0.05 0.1 0.2 0.5 ... (in hold mode: the speed a held "
                    "arrow drives at)"),
    Binding("right_square_bracket", "steps(True)", "steps", key_display="[ ]", show=False, group=DRIVING),
    Binding("s", "setpoint", "exact setpoint", key_display="s", show=False, group=DRIVING,
            tooltip="latched mode: type an exact speed (m/s) and turn rate (rad/s), enter sets them; still clamped to "
                    "the envelope and shaped like every request"),
    Binding("m", "toggle_mode", "hold/latch", key_display="m", group=MODES,
            tooltip="switch hold ↔ latched mode (the request goes to zero on every switch)"),
    Binding("k", "keepalive", "still here", key_display="k", group=MODES,
            tooltip="still here: latched mode stops the robot (controlled) after the keep-alive time without a "
                    "key; k renews it and changes nothing else"),
    Binding("f", "monitor", "frames", key_display="f", show=False, group=MODES,
            tooltip="raw frame monitor: the last frames both ways, decoded and raw, CRC errors and malformed lines "
                    "highlighted; p pauses, escape or f closes"),
    Binding("question_mark,f1", "help", "help", key_display="?", group=MODES,
            tooltip="this help; escape or ? closes it"),
]
"""The main screen's bindings: dead while an overlay is open."""

_SPOKEN = {"question_mark": "?", "left_square_bracket": "[", "right_square_bracket": "]", "space": "space"}


@dataclass(frozen=True, slots=True)
class KeyRow:
    shown: str          # as on the hint bar and the key card
    keys: str           # every key of the row, spelled out (help overlay)
    short: str
    full: str
    group: str
    hint: bool


def _spelled(keys: list[str]) -> str:
    digits = [k for k in keys if k.isdigit()]
    if len(digits) > 2:
        keys = [f"{digits[0]} … {digits[-1]}"] + [k for k in keys if not k.isdigit()]
    return " / ".join(_SPOKEN.get(k, k) for k in keys)


def key_rows(*bindings: Iterable[BindingType]) -> list[KeyRow]:
    """The rows the screen shows, in binding order: bindings sharing a key_display make one row."""
    rows: dict[str, tuple[Binding, list[str]]] = {}
    for group in bindings:
        for binding in group:
            if not isinstance(binding, Binding):
                continue                     # (key, action) tuples carry no words: none are used here
            shown = binding.key_display or binding.key
            first, keys = rows.setdefault(shown, (binding, []))
            keys.extend(key.strip() for key in binding.key.split(","))
    return [KeyRow(shown, _spelled(keys), first.description, first.tooltip or first.description,
                   first.group.description if first.group is not None else "", first.show)
            for shown, (first, keys) in rows.items()]


DRIVE_KEYS = key_rows(APP_BINDINGS, SCREEN_BINDINGS)
