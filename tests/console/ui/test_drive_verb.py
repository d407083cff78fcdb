"""`diffdeck drive` refuses bad options with one line naming the option, the value and what is allowed (exit 2),
before any link is opened or any screen drawn."""

from __future__ import annotations

import pytest

from console.cli import main
from tests.console.ui.conftest import PROFILES

WREN = str(PROFILES / "wren.toml")


@pytest.mark.parametrize("args, key", [
    (["--deadman-s", "0.1"], "--deadman-s"),        # shorter than a typical auto-repeat delay
    (["--deadman-s", "nan"], "--deadman-s"),
    (["--speed-step-mps", "0"], "--speed-step-mps"),
    (["--speed-step-mps", "5"], "--speed-step-mps"),   # above wren's 1.0 m/s top speed
    (["--turn-step-radps", "-1"], "--turn-step-radps"),
    (["--rate-hz", "5"], "--rate-hz"),
    (["--rate-hz", "inf"], "--rate-hz"),
    (["--link", " "], "--link"),
])
def test_bad_options_are_one_line_and_exit_2(args: list[str], key: str, capsys: pytest.CaptureFixture[str]) -> None:
    assert main(["drive", WREN, *args]) == 2
    err = capsys.readouterr().err.strip()
    assert len(err.splitlines()) == 1
    assert err.startswith(f"diffdeck: drive: {key} = ")


def test_a_missing_profile_is_the_profile_loader_s_error(capsys: pytest.CaptureFixture[str]) -> None:
    assert main(["drive", str(PROFILES / "no-such-robot.toml")]) == 2
    assert "no-such-robot.toml" in capsys.readouterr().err
