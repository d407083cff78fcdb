"""A small braille-dot canvas for plots and the top-down view (2x4 dots per terminal cell, no extra dependency).

Each dot carries a layer number; a cell takes the style of the highest layer drawn in it, so a later, more important
series (say the measured speed) wins the cell where lines cross.
"""

from __future__ import annotations

from itertools import groupby

import numpy as np
from rich.style import Style

from console.ui.rows import Run

# Unicode braille patterns: bit of the dot at (column, row) inside a 2x4 cell (Unicode Standard, block U+2800).
_DOT_BITS = np.array([[0x01, 0x08], [0x02, 0x10], [0x04, 0x20], [0x40, 0x80]], dtype=np.uint16)


class BrailleCanvas:
    """`cols` x `rows` terminal cells; dot coordinates run x right from 0 to 2*cols, y DOWN from 0 to 4*rows."""

    def __init__(self, cols: int, rows: int) -> None:
        self.cols = max(cols, 1)
        self.rows = max(rows, 1)
        self.dots = np.zeros((self.rows * 4, self.cols * 2), dtype=np.uint8)
        self._marks: dict[tuple[int, int], tuple[str, Style]] = {}

    @property
    def width(self) -> int:
        return self.cols * 2

    @property
    def height(self) -> int:
        return self.rows * 4

    def points(self, xs: np.ndarray, ys: np.ndarray, layer: int) -> None:
        """Set the dots nearest to the points that fall on the canvas."""
        x = np.asarray(xs, dtype=float).ravel()
        y = np.asarray(ys, dtype=float).ravel()
        finite = np.isfinite(x) & np.isfinite(y)
        xi = np.rint(x[finite]).astype(np.int64)
        yi = np.rint(y[finite]).astype(np.int64)
        inside = (xi >= 0) & (xi < self.width) & (yi >= 0) & (yi < self.height)
        xi, yi = xi[inside], yi[inside]
        self.dots[yi, xi] = np.maximum(self.dots[yi, xi], layer)

    def polyline(self, xs: np.ndarray, ys: np.ndarray, layer: int) -> None:
        """Join consecutive points with straight runs of dots (vectorised; NaN points break the line)."""
        x = np.asarray(xs, dtype=float)
        y = np.asarray(ys, dtype=float)
        if x.size == 1:
            self.points(x, y, layer)
        if x.size < 2:
            return
        x0, y0, dx, dy = x[:-1], y[:-1], np.diff(x), np.diff(y)
        keep = np.isfinite(x0) & np.isfinite(y0) & np.isfinite(dx) & np.isfinite(dy)
        x0, y0, dx, dy = x0[keep], y0[keep], dx[keep], dy[keep]
        if x0.size == 0:
            return
        limit = float(self.width + self.height)  # segments far off the canvas need no more dots than it has
        steps = np.minimum(np.ceil(np.maximum(np.abs(dx), np.abs(dy))), limit).astype(np.int64) + 1
        owner = np.repeat(np.arange(steps.size), steps)
        offset = np.arange(owner.size) - np.repeat(np.cumsum(steps) - steps, steps)
        t = offset / np.repeat(np.maximum(steps - 1, 1), steps)
        self.points(x0[owner] + t * dx[owner], y0[owner] + t * dy[owner], layer)

    def hline(self, y: float, layer: int, every: int = 1) -> None:
        """A horizontal line of dots (every `every`-th dot: a faint grid line)."""
        xs = np.arange(0, self.width, every)
        self.points(xs, np.full(xs.size, y), layer)

    def vline(self, x: float, layer: int, every: int = 1) -> None:
        ys = np.arange(0, self.height, every)
        self.points(np.full(ys.size, x), ys, layer)

    def mark(self, col: int, row: int, char: str, style: Style) -> None:
        """Put a whole character in a cell (the robot's heading arrow, a label); it replaces the dots there."""
        if 0 <= col < self.cols and 0 <= row < self.rows:
            self._marks[(col, row)] = (char, style)

    def label(self, col: int, row: int, text: str, style: Style) -> None:
        for i, char in enumerate(text):
            self.mark(col + i, row, char, style)

    def to_rows(self, styles: dict[int, Style]) -> list[list[Run]]:
        """Render: one list of styled runs per cell row; cells with no dot are spaces."""
        cells = self.dots.reshape(self.rows, 4, self.cols, 2)
        bits = ((cells > 0) * _DOT_BITS[None, :, None, :]).sum(axis=(1, 3))
        layers = np.where(bits > 0, cells.max(axis=(1, 3)), 0)
        rows: list[list[Run]] = []
        for row in range(self.rows):
            keyed: list[tuple[str, Style | None]] = []
            for col, (b, layer) in enumerate(zip(bits[row].tolist(), layers[row].tolist())):
                marked = self._marks.get((col, row))
                if marked is not None:
                    keyed.append(marked)
                else:
                    keyed.append((chr(0x2800 + b) if b else " ", styles.get(layer)))
            rows.append([("".join(char for char, _ in run), style)
                         for style, run in groupby(keyed, key=lambda item: item[1])])
        return rows
