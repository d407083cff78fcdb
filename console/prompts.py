"""Questions to the operator on standard input, asked again after a typo.

Why: a calibration or a polarity check asks its questions after runs that took minutes on the floor or the bench; a
typo must cost one more line, never the runs and the observations made so far. End of input (ctrl+d, a closed pipe)
is the one way out: an InputError naming the question, exit 2.
"""

from __future__ import annotations

import sys
from collections.abc import Callable
from typing import TypeVar

from rich.console import Console

from console.errors import InputError

T = TypeVar("T")


def ask(console: Console, prompt: str, parse: Callable[[str], T], *, where: str, field: str) -> T:
    """Print `prompt`, read a line, return `parse(line)`; an InputError from `parse` is shown (its one line) and the
    question asked again."""
    while True:
        console.print(prompt)
        line = sys.stdin.readline()
        if not line:
            raise InputError(where, field, "(end of input)", "an answer on standard input")
        try:
            return parse(line)
        except InputError as error:
            console.print(f"[yellow]{error}[/]: try again (ctrl+d gives up)", highlight=False)


def exactly(phrase: str, where: str, field: str) -> Callable[[str], str]:
    """A parser accepting only `phrase` (case and surrounding blanks aside)."""
    def parse(line: str) -> str:
        answer = " ".join(line.lower().split())
        if answer != phrase:
            raise InputError(where, field, answer or "(none)", f"type exactly {phrase!r}")
        return answer
    return parse


def one_of(choices: tuple[str, ...], where: str, field: str) -> Callable[[str], str]:
    """A parser accepting one of `choices` (case and repeated blanks aside)."""
    def parse(line: str) -> str:
        answer = " ".join(line.lower().split())
        if answer not in choices:
            raise InputError(where, field, answer or "(none)", "one of " + ", ".join(choices))
        return answer
    return parse
