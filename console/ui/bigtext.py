"""Large type for the safety state: a 5-pixel-high bitmap font drawn with half blocks into 3 terminal rows."""

from __future__ import annotations

# Our own bitmaps ("#" = ink). Every glyph is 5 rows high; widths vary.
_GLYPHS: dict[str, tuple[str, ...]] = {
    "A": (".#.", "#.#", "###", "#.#", "#.#"),
    "D": ("##.", "#.#", "#.#", "#.#", "##."),
    "E": ("###", "#..", "##.", "#..", "###"),
    "G": (".###", "#...", "#.##", "#..#", ".###"),
    "I": ("###", ".#.", ".#.", ".#.", "###"),
    "M": ("#...#", "##.##", "#.#.#", "#...#", "#...#"),
    "N": ("#..#", "##.#", "#.##", "#..#", "#..#"),
    "O": (".#.", "#.#", "#.#", "#.#", ".#."),
    "P": ("##.", "#.#", "##.", "#..", "#.."),
    "R": ("##.", "#.#", "##.", "#.#", "#.#"),
    "S": (".##", "#..", ".#.", "..#", "##."),
    "T": ("###", ".#.", ".#.", ".#.", ".#."),
    "?": ("##.", "..#", ".#.", "...", ".#."),
    " ": ("..", "..", "..", "..", ".."),
}
_HALF = {(False, False): " ", (True, False): "▀", (False, True): "▄", (True, True): "█"}


def big_lines(word: str) -> list[str]:
    """Three rows of text spelling `word` (upper-cased; letters without a glyph raise KeyError)."""
    glyphs = [_GLYPHS[char] for char in word.upper()]
    pixel_rows = [".".join(glyph[row] for glyph in glyphs) for row in range(5)]
    pixel_rows.append("." * len(pixel_rows[0]))  # a blank sixth row fills the last half-block row
    return [
        "".join(_HALF[(t == "#", b == "#")] for t, b in zip(top, bottom))
        for top, bottom in zip(pixel_rows[0::2], pixel_rows[1::2])
    ]


def big_width(word: str) -> int:
    return len(big_lines(word)[0])
