"""The input panel: what drives when a gamepad or a local keyboard does (`drive --input`), from `snapshot.source`.

It shows the device, whether the operator holds the enable ("released" the moment it is let go), the two stick
positions, and the speed setting, so a person sees why the robot does not move (released, waiting for a stick to be
centred, input lost) before wondering about the robot, and that the terminal's keys only arm and stop meanwhile
(a local keyboard's arrows may reach the terminal too: they are ignored there, silently). Hidden while the
terminal's keys drive.
"""

from __future__ import annotations

from typing import TYPE_CHECKING

from console.inputs.source import InputStatus
from console.ui.rows import Rows
from console.ui.widgets import Panel, signed

if TYPE_CHECKING:
    from console.core.step import SourceStatus

LABEL_W = 8
COMPACT_BELOW = 6        # rows: fewer, and the panel shows its two essential lines
POSITION_STEP = 0.02     # positions shown in steps of 2 % of full stick: finer jitter is not worth a repaint


def stick_bar(position: float, width: int) -> str:
    """A stick's position on a bar from -1 (left end) to +1 (right end) around a marked centre (an odd width, so
    the centre is a cell of its own: one cell less when given an even one)."""
    half = (width - 1) // 2
    if half < 1:
        return ""
    cells = ["─"] * (2 * half + 1)
    cells[half] = "┼"
    cells[half + min(max(round(position * half), -half), half)] = "●"
    return "".join(cells)


class InputPanel(Panel):
    SCOPED_CSS = False      # its short-screen rule starts at the Screen
    DEFAULT_CSS = """
    InputPanel { display: none; height: 8; }
    Screen.-short InputPanel { height: 4; }
    """

    def show(self, status: SourceStatus | None) -> None:
        if not isinstance(status, InputStatus):
            self.display = False
            return
        self.display = True
        self.border_title = "input"
        self._update((status.name, status.enable, status.held, status.lost, status.centring,
                      round(status.speed / POSITION_STEP) * POSITION_STEP,
                      round(status.turn / POSITION_STEP) * POSITION_STEP, status.setting))

    def paint(self, width: int, height: int) -> Rows:
        """Six lines; on a short screen two: the enable and the sticks with the setting."""
        text = Rows()
        if self._shown is None:
            return text
        name, enable, held, lost, centring, speed, turn, setting = self._shown
        if lost is not None:
            word, detail = "INPUT LOST", lost
        elif held:
            word, detail = "ENABLE HELD", "centre the stick first" if centring else "sticks live"
        else:
            word, detail = "RELEASED", f"hold {enable} to drive"
        if height < COMPACT_BELOW:
            text.append(word, "bold" if held else "bold reverse")
            text.append(f" · {detail}\n", "italic")
            text.append(f"speed {signed(speed)} turn {signed(turn)} · {setting:.0%}")
            return text
        text.append(name + "\n", "bold")
        text.append(word, "bold" if held else "bold reverse")
        text.append(f" · {detail}\n", "italic")
        bar_w = max(width - LABEL_W - 7, 0)
        for label, position in (("speed", speed), ("turn", turn)):
            text.append(f"{label:<{LABEL_W}}", "dim")
            text.append(stick_bar(position, bar_w) + f" {signed(position)}\n")
        text.append(f"{'setting':<{LABEL_W}}", "dim")
        text.append(f"full stick = {setting:.0%} of top\n")
        text.append("terminal: arm and stop keys only", "dim")
        return text
