"""The input panel: what drives when a gamepad or a local keyboard does (`drive --input`), from `snapshot.source`.

It shows the device, whether the operator holds the enable ("released" the moment it is let go), the two stick
positions, and the speed setting, so a person sees why the robot does not move (released, waiting for a stick to be
centred, input lost) before wondering about the robot. Hidden while the terminal's keys drive.
"""

from __future__ import annotations

from typing import TYPE_CHECKING

from console.inputs.source import InputStatus
from console.ui.rows import Rows
from console.ui.widgets import Panel, signed

if TYPE_CHECKING:
    from console.core.step import SourceStatus

LABEL_W = 8
POSITION_STEP = 0.02     # positions shown in steps of 2 % of full stick: finer jitter is not worth a repaint


def stick_bar(position: float, width: int) -> str:
    """A stick's position on a bar from -1 (left end) to +1 (right end), the centre marked."""
    if width < 3:
        return ""
    cells = ["─"] * width
    cells[(width - 1) // 2] = "┼"
    cells[min(max(round((position + 1.0) / 2.0 * (width - 1)), 0), width - 1)] = "●"
    return "".join(cells)


class InputPanel(Panel):
    DEFAULT_CSS = """
    InputPanel { display: none; height: 7; }
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
        text = Rows()
        if self._shown is None:
            return text
        name, enable, held, lost, centring, speed, turn, setting = self._shown
        text.append(name + "\n", "bold")
        if lost is not None:
            word, detail = "INPUT LOST", lost
        elif held:
            word, detail = "ENABLE HELD", "centre the stick first" if centring else "sticks live"
        else:
            word, detail = "RELEASED", f"hold {enable} to drive"
        text.append(word, "bold" if held else "bold reverse")
        text.append(f" · {detail}\n", "italic")
        bar_w = max(width - LABEL_W - 7, 0)
        for label, position in (("speed", speed), ("turn", turn)):
            text.append(f"{label:<{LABEL_W}}", "dim")
            text.append(stick_bar(position, bar_w) + f" {signed(position)}\n")
        text.append(f"{'setting':<{LABEL_W}}", "dim")
        text.append(f"{setting:.0%} of top speed / turn rate")
        return text
