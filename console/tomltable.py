"""Reading one TOML table with checks: the one reader behind profiles and bench programs.

Every getter raises the caller's InputError subclass (ProfileError, ProgramError) as one line naming the file, the
dotted key, the value and what is allowed; `finish()` turns every key nobody asked for into such an error with the
closest known name, because a misspelt limit must never fall back to a default silently.
"""

from __future__ import annotations

import difflib
import math
from collections.abc import Collection, Mapping
from typing import Any

from console.errors import InputError


class _Missing:
    def __repr__(self) -> str:
        return "(missing)"


MISSING: Any = _Missing()
"""The default of a required key (shown as "(missing)" in the message)."""


class Shown:
    """A value shown as given (no quotes added), for the one-line message."""

    def __init__(self, text: str) -> None:
        self.text = text

    def __repr__(self) -> str:
        return self.text


def short(value: object) -> Shown:
    """A value as a message shows it: a table as {a table}, an array as [an array], anything long cut to 60
    characters."""
    if isinstance(value, dict):
        return Shown("{a table}")
    if isinstance(value, list):
        return Shown("[an array]")
    text = repr(value)
    return Shown(text if len(text) <= 60 else text[:57] + "...")


class TomlTable:
    """One TOML table being read.

    `name` is the table's dotted name in messages ("limits", "segment[2]"); `known` every key the table may hold (so a
    misspelt required key is reported as the misspelling, not as missing); `ranges` fixed [low, high] bounds by dotted
    key, which override the ones a getter is given.
    """

    def __init__(self, file: str, name: str, table: object, *, error: type[InputError] = InputError,
                 known: Collection[str] = (), ranges: Mapping[str, tuple[float, float]] | None = None,
                 written_as: str | None = None) -> None:
        if not isinstance(table, dict):
            raise error(file, name, short(table), f"a table: write it as {written_as or f'a [{name}] section'}")
        self.file, self.name, self.table = file, name, table
        self._error, self._known, self._ranges = error, frozenset(known), ranges or {}
        self.seen: set[str] = set()

    def error(self, key: str, value: object, allowed: str) -> InputError:
        return self._error(self.file, f"{self.name}.{key}", value, allowed)

    def raw(self, key: str, default: object, allowed: str) -> object:
        """The value as written, or `default`; a required key (default MISSING) left out is an error."""
        self.seen.add(key)
        if key in self.table:
            return self.table[key]
        if default is MISSING:
            for other in self.table:
                if other not in self._known and difflib.get_close_matches(other, [key], n=1):
                    raise self.error(other, short(self.table[other]), f"unknown key (did you mean {key}?)")
            raise self.error(key, MISSING, "required; " + allowed)
        return default

    def number(self, key: str, unit: str = "", default: object = MISSING, *, low: float = 0.0,
               high: float = math.inf, low_inclusive: bool = False) -> float:
        """A finite int or float (never a bool) in (low, high] or [low, high]."""
        if f"{self.name}.{key}" in self._ranges:
            low, high = self._ranges[f"{self.name}.{key}"]
            low_inclusive = True
        if high < math.inf:
            span = f"from {low:g} to {high:g}" if low_inclusive else f"> {low:g} and <= {high:g}"
        else:
            span = f">= {low:g}" if low_inclusive else f"> {low:g}"
        allowed = f"a number {span}" + (f" ({unit})" if unit else "")
        value = self.raw(key, default, allowed)
        if isinstance(value, bool) or not isinstance(value, int | float):
            raise self.error(key, value, allowed)
        number = float(value)
        if not math.isfinite(number) or number > high or number < low or (number == low and not low_inclusive):
            raise self.error(key, value, allowed)
        return number

    def optional(self, key: str, unit: str) -> float | None:
        """An optional positive number; None when left out."""
        if key not in self.table:
            self.seen.add(key)
            return None
        return self.number(key, unit + "; optional")

    def integer(self, key: str, default: object = MISSING, *, low: int = 1, high: int | None = None) -> int:
        allowed = f"a whole number from {low} to {high}" if high is not None else f"a whole number >= {low}"
        value = self.raw(key, default, allowed)
        if isinstance(value, bool) or not isinstance(value, int) or value < low or (high is not None and value > high):
            raise self.error(key, value, allowed)
        return value

    def boolean(self, key: str, default: bool) -> bool:
        value = self.raw(key, default, "true or false")
        if not isinstance(value, bool):
            raise self.error(key, value, "true or false")
        return value

    def text(self, key: str, default: object = MISSING, *, choices: tuple[str, ...] = (),
             empty: bool = False) -> str:
        """A string: one of `choices` when given, else any (non-empty unless `empty`)."""
        if choices:
            allowed = "one of " + ", ".join(f'"{c}"' for c in choices)
        else:
            allowed = "a string" if empty else "a non-empty string"
        value = self.raw(key, default, allowed)
        if not isinstance(value, str) or (choices and value not in choices) or not (empty or value.strip()):
            raise self.error(key, value, allowed)
        return value

    def finish(self, *, subtables: tuple[str, ...] = ()) -> None:
        """Unknown keys are errors, with the closest known name."""
        known = sorted(self.seen | set(subtables))
        for key in self.table:
            if key not in known:
                close = difflib.get_close_matches(key, known, n=1)
                hint = f"did you mean {close[0]}?" if close else f"[{self.name}] takes {', '.join(known)}"
                raise self.error(key, short(self.table[key]), f"unknown key ({hint})")
