"""`diffdeck drive --input SOURCE` refused through the real entry point (`console.cli.main`): one line on stderr,
exit 2 (README.md, "Exit codes"), before any loop, link or screen opens."""

from __future__ import annotations

import os
import sys
from pathlib import Path

import pytest

from console.cli import main
from console.inputs import source
from console.inputs.device import DeviceInfo
from console.profile import load_profile

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


def _device(path: str, axes: dict[str, tuple[int, int, int]], buttons: tuple[str, ...]) -> DeviceInfo:
    return DeviceInfo(path, "Pipit P2 handheld (invented)", axes, buttons)


PAD_AXES = {"ABS_Y": (0, 255, 2), "ABS_RX": (0, 255, 2)}


def test_gamepad_takes_the_first_gamepad_found_with_its_ranges(tmp_path: Path,
                                                               monkeypatch: pytest.MonkeyPatch) -> None:
    pytest.importorskip("evdev")
    fifo = tmp_path / "pad"
    os.mkfifo(fifo)
    found = [_device("/dev/input/event1", {}, ("KEY_UP", "KEY_DOWN", "KEY_LEFT", "KEY_RIGHT")),
             _device(str(fifo), PAD_AXES, ("BTN_TL", "BTN_TR"))]
    monkeypatch.setattr(source, "list_devices", lambda: found)
    chosen = source.source_from_option("gamepad", load_profile(WREN))
    assert chosen is not None and chosen.path == str(fifo) and chosen.kind == "gamepad"


@pytest.mark.parametrize(("option", "buttons", "named"), [
    ("gamepad:/dev/null", ("BTN_TR",), "input.hold_to_drive_button = 'BTN_TL'"),
    ("gamepad:/dev/null", ("BTN_TL",), "input.fast_stop_button = 'BTN_TR'"),
    ("keyboard:/dev/null", ("BTN_TL", "BTN_TR"), "KEY_UP"),
])
def test_a_device_without_what_the_profile_names_is_refused(monkeypatch: pytest.MonkeyPatch,
                                                            capsys: pytest.CaptureFixture[str], option: str,
                                                            buttons: tuple[str, ...], named: str) -> None:
    """/dev/null stands in for a device node (a character device anyone may open); its description is faked."""
    pytest.importorskip("evdev")
    monkeypatch.setattr(source, "describe", lambda path: _device(path, PAD_AXES, buttons))
    assert named in refused(capsys, option)


def test_a_pad_without_the_speed_axis_names_the_key_and_the_axes_it_has(monkeypatch: pytest.MonkeyPatch,
                                                                        capsys: pytest.CaptureFixture[str]) -> None:
    pytest.importorskip("evdev")
    monkeypatch.setattr(source, "describe",
                        lambda path: _device(path, {"ABS_X": (0, 255, 0), "ABS_RX": (0, 255, 0)}, ("BTN_TL",)))
    err = refused(capsys, "gamepad:/dev/null")
    assert "input.speed_axis = 'ABS_Y'" in err and "wren.toml" in err and "has: ABS_X, ABS_RX" in err
