"""`diffdeck drive --input SOURCE` refused through the real entry point (`console.cli.main`): one line on stderr,
exit 2 (README.md, "Exit codes"), before any loop, link or screen opens."""

from __future__ import annotations

import sys
from pathlib import Path

import pytest

from console.cli import main
from console.inputs import source

WREN = str(Path(__file__).resolve().parents[3] / "profiles" / "wren.toml")


def refused(capsys: pytest.CaptureFixture[str], option: str) -> str:
    assert main(["drive", WREN, "--input", option]) == 2
    err = capsys.readouterr().err
    assert err.count("\n") == 1, err
    return err


@pytest.mark.parametrize("option", ["joystick", "gamepad:", "keyboard", "keyboard:", "mouse:/dev/input/event3"])
def test_an_unknown_source_names_the_allowed_ones(capsys: pytest.CaptureFixture[str], option: str) -> None:
    err = refused(capsys, option)
    assert "--input" in err and "gamepad:PATH" in err and "keyboard:PATH" in err


def test_a_missing_path_is_one_line(tmp_path: Path, capsys: pytest.CaptureFixture[str]) -> None:
    err = refused(capsys, f"gamepad:{tmp_path / 'event9'}")
    assert "event9" in err and "cannot be opened" in err


def test_a_regular_file_is_not_a_device(tmp_path: Path, capsys: pytest.CaptureFixture[str]) -> None:
    (tmp_path / "events").write_bytes(b"\0" * 24)
    assert "an input device" in refused(capsys, f"keyboard:{tmp_path / 'events'}")


def test_a_character_device_that_is_no_input_device_is_refused(capsys: pytest.CaptureFixture[str]) -> None:
    pytest.importorskip("evdev")
    assert "cannot be read as an input device" in refused(capsys, "gamepad:/dev/null")


def test_no_gamepad_found_says_where_to_look(monkeypatch: pytest.MonkeyPatch,
                                             capsys: pytest.CaptureFixture[str]) -> None:
    pytest.importorskip("evdev")
    monkeypatch.setattr(source, "list_devices", lambda: [])
    assert "no gamepad found" in refused(capsys, "gamepad")


def test_without_evdev_input_says_why(monkeypatch: pytest.MonkeyPatch, capsys: pytest.CaptureFixture[str]) -> None:
    monkeypatch.setitem(sys.modules, "evdev", None)     # import evdev now raises ImportError
    assert "evdev" in refused(capsys, "gamepad")


def test_on_another_system_only_the_terminal_drives(monkeypatch: pytest.MonkeyPatch,
                                                   capsys: pytest.CaptureFixture[str]) -> None:
    monkeypatch.setattr(sys, "platform", "darwin")
    assert "Linux input subsystem" in refused(capsys, "gamepad:/dev/input/event0")
