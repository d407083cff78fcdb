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


@pytest.mark.parametrize("options, link, recorded", [
    ([], "/dev/ttyACM0", True),                      # a real link: a black box of every session by default
    (["--no-record"], "/dev/ttyACM0", False),
    ([], "sim", False),                              # the simulated robot: only when asked
    (["--record"], "sim", True),
    ([], "trace+socket://127.0.0.1:9", True),
])
def test_a_real_link_records_unless_told_not_to(options: list[str], link: str, recorded: bool) -> None:
    import argparse

    from console.profile import load_profile
    from console.verbs import drive

    parser = argparse.ArgumentParser()
    drive.add_arguments(parser)
    args = parser.parse_args([WREN, "--link", link, *options])
    assert drive.records(args, drive.profile_for_link(args, load_profile(WREN))) is recorded
