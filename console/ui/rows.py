"""Styled text rows for the panels: runs of (text, style) turned straight into Textual strips.

The panels repaint many times a second; building strips from runs directly skips Textual's general-purpose text
layout (wrapping, markup, alignment), which the panels do not need, for a fraction of the CPU time.
"""

from __future__ import annotations

from functools import lru_cache

from rich.segment import Segment
from rich.style import Style
from textual.strip import Strip

Run = tuple[str, Style | None]


@lru_cache(maxsize=256)
def _parse(style: str) -> Style:
    return Style.parse(style)


class Rows:
    """Lines of styled runs; `append` takes text that may contain newlines, like rich's Text.append."""

    def __init__(self) -> None:
        self.lines: list[list[Run]] = [[]]

    def append(self, text: str, style: Style | str | None = None) -> Rows:
        resolved = _parse(style) if isinstance(style, str) else style
        for i, part in enumerate(text.split("\n")):
            if i:
                self.lines.append([])
            if part:
                self.lines[-1].append((part, resolved))
        return self

    def extend(self, runs: list[Run]) -> None:
        """Add runs to the current line."""
        self.lines[-1].extend(runs)

    def newline(self) -> None:
        self.lines.append([])

    def plain(self) -> list[str]:
        return ["".join(text for text, _ in line) for line in self.lines]

    def centred(self, width: int) -> Rows:
        """Each line padded on the left to sit in the middle of `width` cells."""
        for line, text in zip(self.lines, self.plain()):
            pad = (width - len(text)) // 2
            if pad > 0:
                line.insert(0, (" " * pad, None))
        return self

    def strips(self, width: int, base: Style) -> list[Strip]:
        """One strip per line, each exactly `width` cells (cropped or padded), styles laid over the widget's own."""
        combined: dict[Style | None, Style] = {None: base}
        strips = []
        for line in self.lines:
            segments = []
            for text, style in line:
                over = combined.get(style)
                if over is None:
                    over = combined[style] = base + style
                segments.append(Segment(text, over))
            strips.append(Strip(segments).adjust_cell_length(width, base))
        return strips
