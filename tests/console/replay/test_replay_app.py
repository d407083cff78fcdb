"""The replay screen through Textual's Pilot: every key through the real bindings, on a recording the real loop made
with the simulated robot. Playing is paced by a test clock (`FakeClock`) and the test calls `tick()` itself, as the
screen's timer would, so every run is the same.
"""

from __future__ import annotations

import io
from pathlib import Path

import pytest
from rich.console import Console

from console import replay as replay_module
from console.record import read_csv
from console.replay import open_replay
from console.ui import screens
from console.ui.replay import REPLAY_BINDINGS, SPEEDS, ReplayApp
from console.ui.screens import HelpScreen
from console.ui.widgets import AxisGauge, EventLog, LimitPanel, SafetyBanner, WheelPanel
from tests.console.replay.conftest import SCENE, WREN

SIZE = (120, 40)


class FakeClock:
    def __init__(self) -> None:
        self.now = 100.0

    def __call__(self) -> float:
        return self.now


def make_app(path: Path, at_s: float | None = None, profile: Path | None = None) -> tuple[ReplayApp, FakeClock]:
    clock = FakeClock()
    return ReplayApp(open_replay(path, profile), at_s=at_s, render_hz=1.0, clock=clock), clock


def text_of(app: ReplayApp, widget_type: type, selector: str | None = None) -> str:
    screen = app.replay_screen
    widget = screen.query_one(selector, widget_type) if selector else screen.query_one(widget_type)
    return "\n".join(widget.text_lines())


def rendered(renderable: object) -> str:
    console = Console(width=100, record=True, file=io.StringIO())
    console.print(renderable)
    return " ".join(console.export_text().split())


async def test_the_screen_at_a_time_shows_that_rows_values(scene_recording: Path) -> None:
    """At --at T every panel shows row T of the CSV (read here with the recorder's own reader)."""
    rec = read_csv(scene_recording)
    t_at = SCENE.beyond_s + 1.0
    k = int(next(i for i, t in enumerate(rec["t_s"]) if t >= t_at - 1e-9))
    app, _ = make_app(scene_recording, at_s=t_at)
    async with app.run_test(size=SIZE) as pilot:
        await pilot.pause()
        assert app.row == k
        speed = text_of(app, AxisGauge, "#speed")
        assert f"▼ req {rec['v_req_mps'][k]:+.2f}" in speed and f"█ out {rec['v_mps'][k]:+.2f}" in speed
        assert "▽ target +1.00" in speed                          # wren's speed limit, 1.0 m/s
        wheels = text_of(app, WheelPanel)
        assert f"cmd {rec['left_cmd_radps'][k]:+.2f} rad/s" in wheels
        assert f"meas {rec['right_meas_radps'][k]:+.1f} rad/s" in wheels
        assert "SPEED LIMIT" in text_of(app, LimitPanel)
        banner = text_of(app, SafetyBanner)
        assert rec["state"][k].upper() in banner and "REPLAY scene.csv" in banner
        assert "speed clips the request" in text_of(app, EventLog)


async def test_stepping_moves_one_period_and_holds_still(scene_recording: Path) -> None:
    app, clock = make_app(scene_recording, at_s=2.0)
    async with app.run_test(size=SIZE) as pilot:
        row = app.row
        await pilot.press("right", "right", "right")
        assert app.row == row + 3 and app.t_s == pytest.approx(2.03)
        await pilot.press("left")
        assert app.row == row + 2
        await pilot.press("p", "right")                          # a step while playing holds still
        assert not app.playing
        clock.now += 5.0
        app.tick()
        assert app.row == row + 3
        await pilot.press("home", "left")
        assert app.row == 0 and "first row" in app.note


async def test_playing_follows_the_clock_at_each_speed(scene_recording: Path) -> None:
    app, clock = make_app(scene_recording, at_s=1.0)
    async with app.run_test(size=SIZE) as pilot:
        await pilot.press("p")
        clock.now += 0.5
        app.tick()
        assert app.t_s == pytest.approx(1.5)
        await pilot.press("u", "u")                              # x1 -> x2 -> x4
        assert app.speed == 4.0
        clock.now += 0.5
        app.tick()
        assert app.t_s == pytest.approx(3.5)
        assert app.row == app.replay.row_at(3.5)
        await pilot.press("d", "d", "d", "d", "d")              # down to the least speed, and no further
        assert app.speed == SPEEDS[0] and "least speed" in app.note
        clock.now += 2.0
        app.tick()
        assert app.t_s == pytest.approx(4.0)
        await pilot.press("u", "u", "u", "u", "u", "u")
        assert app.speed == SPEEDS[-1] == 8.0
        clock.now += 10.0
        app.tick()                                               # past the end: stops on the last row
        assert app.row == app.replay.rows - 1 and not app.playing and "end" in app.note
        await pilot.press("p")                                   # play again starts from the beginning
        assert app.playing and app.row == 0


async def test_jumps_land_on_stops_faults_limits_and_events(scene_recording: Path) -> None:
    bound = read_csv(scene_recording)["bound"]
    first_bound = int(next(k for k, name in enumerate(bound) if name))    # the ramp after arming: jerk binds first
    app, _ = make_app(scene_recording)
    replay = app.replay
    stops = [m.row for m in replay.marks if m.event.kind == "stop"]
    async with app.run_test(size=SIZE) as pilot:
        await pilot.press("s")
        assert app.row == stops[0]
        assert app.t_s == pytest.approx(SCENE.stop_s + 0.01)
        assert "STOPPING" in text_of(app, SafetyBanner)
        await pilot.press("s")
        assert app.row == stops[1]
        assert "cause: fault" in text_of(app, SafetyBanner)
        await pilot.press("s")
        assert app.row == stops[1] and app.note == "no later stop"
        await pilot.press("S")
        assert app.row == stops[0]
        await pilot.press("home", "l")                          # the recorded binding limit: ramp limits too
        assert app.row == first_bound and f"{bound[first_bound].upper()} LIMIT" in text_of(app, LimitPanel)
        await pilot.press("f")
        assert "FAULT" in text_of(app, EventLog).splitlines()[-2] + text_of(app, EventLog).splitlines()[-1]
        fault_row = app.row
        await pilot.press("F")
        assert app.note == "no earlier fault" and app.row == fault_row
        await pilot.press("home", "down")
        assert app.t_s == pytest.approx(SCENE.armed_s + 0.01)   # the first event: arming
        await pilot.press("down")
        assert app.t_s == pytest.approx(SCENE.beyond_s + 0.01)
        await pilot.press("up")
        assert app.t_s == pytest.approx(SCENE.armed_s + 0.01)


async def test_a_typed_time_goes_there_and_a_bad_one_stays(scene_recording: Path) -> None:
    app, _ = make_app(scene_recording)
    async with app.run_test(size=SIZE) as pilot:
        await pilot.press("t", *"7.25", "enter")
        await pilot.pause()
        assert app.t_s == pytest.approx(7.25)
        await pilot.press("t", *"soon", "enter")
        await pilot.pause()
        assert app.screen.id == "goto" and "'soon' is not a time" in str(app.screen.query_one("#goto-problem")
                                                                            .render())
        await pilot.press("escape")
        await pilot.pause()
        assert app.screen.id == "replay" and app.t_s == pytest.approx(7.25)


async def test_the_help_lists_every_replay_key_and_says_nothing_moves(scene_recording: Path) -> None:
    app, _ = make_app(scene_recording)
    async with app.run_test(size=SIZE) as pilot:
        await pilot.press("question_mark")
        await pilot.pause()
        assert isinstance(app.screen, HelpScreen)
        shown = app.screen
        help_text = rendered(screens.help_text(shown.deadman_s, shown.key_list, shown.help_notes))
        for binding in REPLAY_BINDINGS:
            if binding.tooltip:
                assert " ".join(binding.tooltip.split()) in help_text
        assert "nothing can be armed" in help_text
        await pilot.press("a", "enter", "space")              # the drive screen's keys do nothing here
        await pilot.press("escape")
        await pilot.pause()
        assert app.screen.id == "replay"


async def test_a_killed_run_replays_to_its_last_whole_row(scene_recording: Path, tmp_path: Path) -> None:
    data = scene_recording.read_bytes()
    cut = tmp_path / "killed.csv"
    cut.write_bytes(data[: int(len(data) * 0.6)])
    app, _ = make_app(cut, profile=WREN)
    rec_t = [float(line.split(b",")[0]) for line in cut.read_bytes().split(b"\n")[1:-1]]
    async with app.run_test(size=SIZE) as pilot:
        events = text_of(app, EventLog)
        assert "the last line was cut off" in events and "no sidecar" in events
        assert "2 things missing" in text_of(app, type(app.replay_screen.title_bar))
        await pilot.press("end")
        assert app.t_s == rec_t[-1]
        assert "not recorded" in text_of(app, type(app.replay_screen.link_panel))
        whole = open_replay(scene_recording)
        before_cut = [m.event.t_s for m in whole.marks if m.event.kind == "stop" and m.event.t_s <= rec_t[-1]]
        await pilot.press("home", *["s"] * (len(before_cut) + 1))     # only the stops before the cut are there
        assert app.t_s == before_cut[-1] and app.note == "no later stop"


async def test_a_bad_cell_reached_by_a_jump_closes_the_screen_with_its_line(scene_recording: Path, tmp_path: Path,
                                                                            monkeypatch: pytest.MonkeyPatch) -> None:
    monkeypatch.setattr(replay_module, "BLOCK_ROWS", 128)
    lines = scene_recording.read_text(encoding="utf-8").splitlines()
    fields = lines[901].split(",")
    fields[3] = "fast"                                                   # v_mps of row 900 (line 902)
    lines[901] = ",".join(fields)
    bad = tmp_path / "late.csv"
    bad.write_text("\n".join(lines) + "\n", encoding="utf-8")
    app, _ = make_app(bad, profile=WREN)
    async with app.run_test(size=SIZE) as pilot:
        await pilot.press("end")
        await pilot.pause()
    assert app.return_value == 2 and app.error is not None and "line 902, v_mps" in str(app.error)
