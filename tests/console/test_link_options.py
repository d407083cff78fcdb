"""--link and --baud, alike on every verb that opens a link: checked before anything opens, applied to the port."""

from __future__ import annotations

import argparse
import os
import pty
import termios
from pathlib import Path

import pytest

from console.cli import main
from console.links import open_link
from console.options import add_link_options, with_link_options
from console.profile import load_profile

ROOT = Path(__file__).resolve().parents[2]
WREN = str(ROOT / "profiles" / "wren.toml")


@pytest.mark.parametrize("verb", [
    ["drive", WREN], ["play", WREN, str(ROOT / "profiles" / "traces" / "wren-corridor-loop.csv")],
    ["bench", WREN, "step"], ["calibrate", WREN]])
@pytest.mark.parametrize("baud", ["0", "20000000"])
def test_a_bad_baud_is_one_line_before_anything_opens(verb: list[str], baud: str, tmp_path: Path,
                                                      capsys: pytest.CaptureFixture[str]) -> None:
    assert main([*verb, "--link", str(tmp_path / "ttyNONE"), "--baud", baud]) == 2
    err = capsys.readouterr().err.strip().splitlines()
    assert len(err) == 1 and f"--baud = {baud}" in err[0] and "from 50 to 12000000" in err[0]


def test_the_baud_reaches_the_serial_port() -> None:
    """The port is opened at the --baud speed, not the profile's (a pty keeps the speed it was set to)."""
    controller, terminal = pty.openpty()
    path = os.ttyname(terminal)
    parser = argparse.ArgumentParser()
    add_link_options(parser)
    profile = with_link_options(parser.parse_args(["--link", path, "--baud", "57600"]), load_profile(WREN), "test")
    assert profile.link.baud == 57600 and load_profile(WREN).link.baud != 57600
    link = open_link(profile.link.url, profile)
    try:
        assert termios.tcgetattr(terminal)[4:6] == [termios.B57600, termios.B57600]     # ispeed, ospeed
    finally:
        link.transport.close()
        os.close(terminal)
        os.close(controller)
