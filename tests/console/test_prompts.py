"""Questions after runs on the floor or the bench: a typo asks again, only the end of input gives up."""

from __future__ import annotations

import io

import pytest
from rich.console import Console

from console.bench.polarity import OBSERVATIONS
from console.errors import InputError
from console.prompts import ask, exactly, one_of
from console.verbs.calibrate import parse_end_position


def _console() -> tuple[Console, io.StringIO]:
    shown = io.StringIO()
    return Console(file=shown, width=200, color_system=None), shown


def test_a_typo_in_the_measured_position_asks_again(monkeypatch: pytest.MonkeyPatch) -> None:
    monkeypatch.setattr("sys.stdin", io.StringIO("0.12 -0.o5\n0.12 -0.05\n"))
    console, shown = _console()
    assert ask(console, "where?", parse_end_position, where="calibrate", field="end position") == (0.12, -0.05)
    lines = shown.getvalue().splitlines()
    assert lines.count("where?") == 2
    assert any("end position" in line and "0.12 -0.o5" in line and "try again" in line for line in lines)


def test_a_typo_in_an_observation_asks_again_and_the_answer_is_normalised(monkeypatch: pytest.MonkeyPatch) -> None:
    monkeypatch.setattr("sys.stdin", io.StringIO("left forward\n  Left   Forwards \n"))
    console, _ = _console()
    parse = one_of(OBSERVATIONS, "bench", "observation (left forwards)")
    assert ask(console, "which?", parse, where="bench", field="observation") == "left forwards"


def test_a_confirmation_needs_the_exact_phrase(monkeypatch: pytest.MonkeyPatch) -> None:
    monkeypatch.setattr("sys.stdin", io.StringIO("yes\nfloor clear\n"))
    console, shown = _console()
    assert ask(console, "go?", exactly("floor clear", "calibrate", "confirmation"), where="calibrate",
               field="confirmation") == "floor clear"
    assert "'floor clear'" in shown.getvalue()


def test_the_end_of_input_gives_up_with_one_line(monkeypatch: pytest.MonkeyPatch) -> None:
    monkeypatch.setattr("sys.stdin", io.StringIO("left sideways\n"))
    console, _ = _console()
    with pytest.raises(InputError) as raised:
        ask(console, "which?", one_of(OBSERVATIONS, "bench", "obs"), where="bench", field="observation (left)")
    assert "observation (left)" in str(raised.value) and "\n" not in str(raised.value)
