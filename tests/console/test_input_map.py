"""Hold-to-drive from an input device: the sans-I/O mapper's properties, and `diffdeck input map` end to end.

The mapping is written out here from its definition (README, "[input]"): x = (value - (min + max) / 2) / ((max -
min) / 2), clipped to [-1, 1], negated when inverted; 0 inside the deadzone, else (|x| - dz) / (1 - dz) with its
sign; y = (1 - e) x + e x^3; v = y x setting x top speed (top reverse speed for y < 0), omega = y x setting x top
turn rate. Event codes are the kernel's names (Linux input subsystem, include/uapi/linux/input-event-codes.h).
"""

from __future__ import annotations

import csv
import io
import os
import struct
import threading
from pathlib import Path

import pytest
from hypothesis import given
from hypothesis import strategies as st

from console.cli import main
from console.inputs.device import read_events
from console.inputs.mapper import Event, InputConfig, KeyboardMapper, Mapper, Stop, stick_position

WREN = Path(__file__).resolve().parents[2] / "profiles" / "wren.toml"
CONFIG = InputConfig()
TOP_V, TOP_REV, TOP_W = 1.0, 0.4, 2.5     # wren's envelope
raw = st.integers(-32768, 32767)


def by_hand(value: int, inverted: bool, deadzone: float = 0.08, expo: float = 0.3) -> float:
    x = (value - (-32768 + 32767) / 2) / ((32767 + 32768) / 2)
    x = max(-1.0, min(1.0, -x if inverted else x))
    if abs(x) <= deadzone:
        return 0.0
    x = (abs(x) - deadzone) / (1 - deadzone) * (1 if x > 0 else -1)
    return (1 - expo) * x + expo * x**3


def mapper(setting: float = 0.3) -> Mapper:
    return Mapper(CONFIG, TOP_V, TOP_REV, TOP_W, setting=setting)


@given(raw, st.booleans())
def test_stick_position_follows_its_definition(value: int, inverted: bool) -> None:
    assert stick_position(value, -32768, 32767, inverted, 0.08, 0.3) == pytest.approx(by_hand(value, inverted))


@given(raw, raw)
def test_stick_position_is_monotone_and_within_one(a: int, b: int) -> None:
    low, high = sorted((a, b))
    assert -1.0 <= stick_position(low, -32768, 32767, False, 0.08, 0.3) <= stick_position(
        high, -32768, 32767, False, 0.08, 0.3) <= 1.0


@given(st.floats(0.0, 0.5), st.floats(0.0, 1.0))
def test_the_response_starts_from_zero_at_the_deadzone_edge(deadzone: float, expo: float) -> None:
    # continuity: just outside the deadzone the position is just above zero (no jump)
    edge = -0.5 + 32767.5 * (deadzone + 1e-6)   # the raw value where x is a hair above the deadzone
    assert 0.0 <= stick_position(edge, -32768, 32767, False, deadzone, expo) < 1e-3


events = st.lists(st.one_of(
    st.tuples(st.just("EV_ABS"), st.sampled_from(["ABS_Y", "ABS_RX", "ABS_X"]), raw),
    st.tuples(st.just("EV_KEY"), st.sampled_from(["BTN_TL", "BTN_TR", "BTN_WEST", "BTN_NORTH", "BTN_SOUTH"]),
              st.integers(0, 2)),
), max_size=60)


@given(events, st.floats(0.1, 1.0))
def test_never_beyond_the_speed_setting_and_nothing_without_the_button(sequence: list[tuple[str, str, int]],
                                                                       setting: float) -> None:
    m, held = mapper(setting), False
    for t, (kind, code, value) in enumerate(sequence):
        request = m.feed(Event(t * 0.01, kind, code, value))
        if kind == "EV_KEY" and code == "BTN_TL" and value in (0, 1):
            held = value == 1
        assert request.enabled is held
        if not held:
            assert (request.v_mps, request.omega_radps) == (0.0, 0.0)   # released: zero in the same event
        assert -m.setting * TOP_REV - 1e-12 <= request.v_mps <= m.setting * TOP_V + 1e-12
        assert abs(request.omega_radps) <= m.setting * TOP_W + 1e-12
        assert 0.1 - 1e-9 <= m.setting <= 1.0 + 1e-9


@given(st.integers(-32768, -8000), st.integers(-2600, 2600))   # the deadzone is 0.08 x 32767.5 = 2621 either side
def test_an_off_centre_stick_gives_zero_until_it_has_been_centred(pushed: int, centre: int) -> None:
    m = mapper()
    m.feed(Event(0.0, "EV_ABS", "ABS_Y", pushed))              # stick held forward (up is negative on most pads)
    request = m.feed(Event(0.1, "EV_KEY", "BTN_TL", 1))         # the button pressed with the stick off centre
    assert request.enabled and request.v_mps == 0.0
    assert m.feed(Event(0.2, "EV_ABS", "ABS_Y", pushed + 1)).v_mps == 0.0   # still no lurch
    m.feed(Event(0.3, "EV_ABS", "ABS_Y", centre))              # through the centre (inside the deadzone)
    request = m.feed(Event(0.4, "EV_ABS", "ABS_Y", pushed))
    assert request.v_mps == pytest.approx(by_hand(pushed, True) * 0.3 * TOP_V)


def test_full_stick_is_the_setting_and_the_buttons_step_it() -> None:
    m = mapper()
    m.feed(Event(0.0, "EV_KEY", "BTN_TL", 1))
    assert m.feed(Event(0.1, "EV_ABS", "ABS_Y", -32768)).v_mps == pytest.approx(0.3 * TOP_V)   # full forward
    assert m.feed(Event(0.2, "EV_KEY", "BTN_NORTH", 1)).v_mps == pytest.approx(0.4 * TOP_V)    # faster
    m.feed(Event(0.3, "EV_KEY", "BTN_NORTH", 0))
    assert m.feed(Event(0.4, "EV_ABS", "ABS_Y", 32767)).v_mps == pytest.approx(-0.4 * TOP_REV)
    assert m.feed(Event(0.5, "EV_ABS", "ABS_RX", -32768)).omega_radps == pytest.approx(0.4 * TOP_W)  # left
    stop = m.feed(Event(0.6, "EV_KEY", "BTN_TR", 1))
    assert stop.stop is Stop.FAST and (stop.v_mps, stop.omega_radps) == (0.0, 0.0)
    lost = m.lost(0.7)
    assert lost.stop is Stop.LOST and not lost.enabled


def run_map(tmp_path: Path, capsys: pytest.CaptureFixture[str], text: str, *options: str) -> tuple[int, str, str]:
    events = tmp_path / "events.csv"
    events.write_text(text)
    code = main(["input", "map", str(WREN), str(events), *options])
    captured = capsys.readouterr()
    return code, captured.out, captured.err


def test_input_map_end_to_end(tmp_path: Path, capsys: pytest.CaptureFixture[str]) -> None:
    # an invented session on a pad whose sticks report 0 .. 255 with a flat of 10
    log = ("t_s,type,code,value\n"
           "0.000,absinfo,ABS_Y,0:255:10\n0.000,absinfo,ABS_RX,0:255:10\n"
           "0.000,EV_ABS,ABS_Y,128\n"
           "0.100,EV_KEY,BTN_TL,1\n"
           "0.200,EV_ABS,ABS_Y,0\n"
           "0.300,EV_ABS,ABS_RX,64\n"
           "0.400,EV_KEY,BTN_TL,0\n"
           "0.500,EV_KEY,BTN_TR,1\n")
    code, out, err = run_map(tmp_path, capsys, log, "--speed-setting", "0.5")
    assert (code, err) == (0, "")
    rows = list(csv.DictReader(io.StringIO(out)))
    assert list(rows[0]) == ["t_s", "v_mps", "omega_radps", "enabled", "stop"]
    assert len(rows) == 6      # one per event, none for the absinfo rows
    # full forward on 0..255: x = -(0 - 127.5) / 127.5 = 1 -> y = 1 -> v = 0.5 x 1.0 m/s
    assert float(rows[2]["v_mps"]) == pytest.approx(0.5)
    # ABS_RX 64: x = -(64 - 127.5) / 127.5 = 0.498; the deadzone is the larger of 0.08 and 10 / 127.5 = 0.0784
    x = (0.498039 - 0.08) / 0.92
    assert float(rows[3]["omega_radps"]) == pytest.approx((0.7 * x + 0.3 * x**3) * 0.5 * 2.5, rel=1e-4)
    assert (rows[4]["enabled"], rows[4]["v_mps"], rows[4]["omega_radps"]) == ("0", "0", "0")
    assert rows[5]["stop"] == "fast"


@pytest.mark.parametrize(("line", "field", "allowed"), [
    ("0.1,EV_ABS,ABS_Y,1_0", "value", "a finite number"),
    ("0.1,EV_ABS,ABS_Y,0.5", "value", "a whole number"),
    ("0.1,EV_REL,REL_X,3", "type", "EV_ABS"),
    ("0.1,absinfo,ABS_Y,10:0:0", "value", "min < max"),
    ("0.1,EV_ABS,ABS_Y", "row", "4 fields"),
    ("-0.5,EV_ABS,ABS_Y,1", "t_s", "at least the previous"),
])
def test_bad_rows_are_one_line_and_exit_2(tmp_path: Path, capsys: pytest.CaptureFixture[str], line: str,
                                          field: str, allowed: str) -> None:
    code, out, err = run_map(tmp_path, capsys, "t_s,type,code,value\n0,EV_ABS,ABS_Y,0\n" + line + "\n")
    assert (code, out) == (2, "")
    assert err.count("\n") == 1 and "line 3" in err and field in err and allowed in err


@pytest.mark.parametrize(("section", "key", "allowed"), [
    ('speed_axis = "ABS_YY"', "input.speed_axis", "did you mean ABS_Y"),
    ('hold_to_drive_button = "ABS_X"', "input.hold_to_drive_button", "BTN_"),
    ("deadzone = 0.95", "input.deadzone", "from 0 to 0.9"),
    ('turn_axis = "ABS_Y"', "input.turn_axis", "other than speed_axis"),
    ("expoo = 0.2", "input.expoo", "did you mean expo?"),
])
def test_a_bad_input_section_is_a_profile_error(tmp_path: Path, capsys: pytest.CaptureFixture[str], section: str,
                                                key: str, allowed: str) -> None:
    profile = tmp_path / "robot.toml"
    profile.write_text(WREN.read_text() + "\n[input]\n" + section + "\n")
    assert main(["profile", "check", str(profile)]) == 2
    err = capsys.readouterr().err
    assert err.count("\n") == 1 and key in err and allowed in err


# --- the device shell: a pipe or FIFO carrying the kernel's struct input_event records -------------------------------
# struct input_event { struct timeval time; __u16 type; __u16 code; __s32 value; } (include/uapi/linux/input.h);
# type and code numbers from include/uapi/linux/input-event-codes.h: EV_SYN 0, EV_KEY 1, EV_ABS 3, ABS_Y 1,
# ABS_RX 3, BTN_TL 310, BTN_TR 311.
RECORD = struct.Struct("@llHHi")


def records(*events: tuple[float, int, int, int]) -> bytes:
    out = b""
    for t, kind, code, value in events:
        out += RECORD.pack(int(t), round((t % 1) * 1e6), kind, code, value)
        out += RECORD.pack(int(t), round((t % 1) * 1e6), 0, 0, 0)      # SYN_REPORT after each, as the kernel does
    return out


def test_records_from_a_pipe_become_named_events_and_the_end_is_seen() -> None:
    read, write = os.pipe()
    os.write(write, records((12.25, 3, 1, -32768), (12.5, 1, 310, 1)))
    os.close(write)          # the "device" goes away
    try:
        assert list(read_events(read)) == [Event(12.25, "EV_ABS", "ABS_Y", -32768), Event(12.5, "EV_KEY", "BTN_TL", 1)]
    finally:
        os.close(read)


def test_input_watch_on_a_fifo(tmp_path: Path, capsys: pytest.CaptureFixture[str]) -> None:
    fifo = tmp_path / "pad"
    os.mkfifo(fifo)

    def pad() -> None:
        with open(fifo, "wb") as out:   # blocks until the watcher opens its end
            out.write(records((1.0, 1, 310, 1), (1.1, 3, 1, -32768), (1.2, 1, 310, 0), (1.3, 1, 311, 1)))

    writer = threading.Thread(target=pad)
    writer.start()
    code = main(["input", "watch", str(fifo), "--profile", str(WREN)])
    writer.join(5.0)
    lines = capsys.readouterr().out.splitlines()
    assert code == 0
    assert lines[0].startswith("watching")
    assert "BTN_TL" in lines[1] and "held" in lines[1]
    # full forward at the default setting 0.3: 0.3 x 1.0 m/s
    assert "ABS_Y" in lines[2] and "speed +0.300 m/s" in lines[2]
    assert "released" in lines[3] and "speed +0.000" in lines[3]
    assert "stop fast" in lines[4]
    assert "no more events" in lines[5]


def test_watching_something_that_is_not_a_device_is_one_line(tmp_path: Path,
                                                              capsys: pytest.CaptureFixture[str]) -> None:
    plain = tmp_path / "notes.txt"
    plain.write_text("hello")
    assert main(["input", "watch", str(plain)]) == 2
    err = capsys.readouterr().err
    assert err.count("\n") == 1 and "input_event records" in err


def test_a_local_keyboard_drives_while_an_arrow_is_held_and_stops_on_release() -> None:
    keys = KeyboardMapper(TOP_V, TOP_REV, TOP_W, setting=0.5)
    assert keys.feed(Event(0.0, "EV_KEY", "KEY_UP", 1)).v_mps == pytest.approx(0.5 * TOP_V)
    assert keys.feed(Event(0.1, "EV_KEY", "KEY_UP", 2)).v_mps == pytest.approx(0.5 * TOP_V)   # auto-repeat: held
    both = keys.feed(Event(0.2, "EV_KEY", "KEY_LEFT", 1))
    assert (both.v_mps, both.omega_radps) == pytest.approx((0.5 * TOP_V, 0.5 * TOP_W))
    keys.feed(Event(0.3, "EV_KEY", "KEY_LEFT", 0))
    released = keys.feed(Event(0.4, "EV_KEY", "KEY_UP", 0))
    assert (released.v_mps, released.omega_radps, released.enabled) == (0.0, 0.0, False)   # at once, exactly
    assert keys.feed(Event(0.5, "EV_KEY", "KEY_RIGHTBRACE", 1)).v_mps == 0.0              # setting up, no motion
    assert keys.feed(Event(0.6, "EV_KEY", "KEY_DOWN", 1)).v_mps == pytest.approx(-0.6 * TOP_REV)
    assert keys.feed(Event(0.7, "EV_KEY", "KEY_X", 1)).stop is Stop.FAST
    keys.require_centre()                       # at arming, a key still held counts only when pressed again
    assert keys.feed(Event(0.8, "EV_KEY", "KEY_DOWN", 2)).v_mps == 0.0


def test_input_map_with_a_keyboard_log(tmp_path: Path, capsys: pytest.CaptureFixture[str]) -> None:
    log = "t_s,type,code,value\n0.0,EV_KEY,KEY_UP,1\n0.5,EV_KEY,KEY_UP,0\n"
    code, out, _ = run_map(tmp_path, capsys, log, "--source", "keyboard")
    rows = list(csv.DictReader(io.StringIO(out)))
    assert code == 0
    assert [(row["v_mps"], row["enabled"]) for row in rows] == [(f"{0.3 * TOP_V:.10g}", "1"), ("0", "0")]


def test_input_list_names_each_device_and_what_it_can_drive(monkeypatch: pytest.MonkeyPatch,
                                                            capsys: pytest.CaptureFixture[str]) -> None:
    from console.inputs.device import DeviceInfo
    from console.verbs import input as verb

    pad = DeviceInfo("/dev/input/event7", "handheld pad (invented)", {"ABS_Y": (0, 255, 10), "ABS_RX": (0, 255, 10)},
                     ("BTN_TL", "BTN_TR"))
    keys = DeviceInfo("/dev/input/event3", "bench keyboard", {}, ("KEY_UP", "KEY_DOWN", "KEY_LEFT", "KEY_RIGHT"))
    monkeypatch.setattr(verb, "list_devices", lambda: [pad, keys])
    assert main(["input", "list"]) == 0
    lines = capsys.readouterr().out.splitlines()
    assert lines[0].startswith("/dev/input/event7  gamepad") and "ABS_Y 0..255" in lines[0]
    assert lines[1].startswith("/dev/input/event3  keyboard") and "4 buttons/keys" in lines[1]
    monkeypatch.setattr(verb, "list_devices", lambda: [])
    assert main(["input", "list"]) == 0
    assert capsys.readouterr().out.startswith("no input devices readable here")
