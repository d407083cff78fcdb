"""The stop cause and the binding limit the loop knew, in the recording (the `cause` and `bound` columns) and in the
replay, on the stop-cause scene (conftest.drive_cause_scene: the real loop, shaper, simulated robot and recorder on a
virtual clock; an operator stop, a deadman stop, a deadman stop that a UI stall replaces, ramps bound by the
acceleration and jerk limits, a request beyond the top speed).

The expected values come from outside the recorder and the replay: the loop's own snapshot after every cycle, taken
by the script as the run went; the script's times and causes; the profile's limits read with tomllib, held against
the recorded output by the kinematics of a ramp; the recorder's plain reader (console.record.read_csv) for the file.
"""

from __future__ import annotations

import tomllib
from pathlib import Path

import numpy as np
import pytest

from console.cli import main
from console.core.safety import StopCause
from console.core.step import LIMIT_EVENT_HOLD_S, Snapshot
from console.record import read_csv
from console.replay import notable_moments, open_replay
from console.ui.widgets import EventLog, LimitPanel, SafetyBanner
from tests.console.replay.conftest import CAUSE_SCENE, WREN, drive_cause_scene, old_format
from tests.console.replay.test_replay_app import make_app, text_of

PERIOD_S = 0.01     # wren's [link] rate_hz = 100
LIMITS = tomllib.loads(WREN.read_text(encoding="utf-8"))["limits"]


@pytest.fixture(scope="module")
def cause_run(tmp_path_factory: pytest.TempPathFactory) -> tuple[Path, list[Snapshot]]:
    return drive_cause_scene(tmp_path_factory.mktemp("causes") / "causes.csv")


def _word(value: object) -> str:
    return "" if value is None else value.value      # type: ignore[attr-defined]  # an enum


def _runs(*columns: np.ndarray) -> list[tuple[int, int, str]]:
    """(first row, row after the last, first column's cell) of each stretch of rows equal in every column."""
    size = columns[0].size
    starts = [0] + [i for i in range(1, size) if any(c[i] != c[i - 1] for c in columns)]
    return [(a, z, str(columns[0][a])) for a, z in zip(starts, starts[1:] + [size])]


def test_the_columns_hold_what_the_loops_snapshot_held_at_every_row(cause_run) -> None:
    path, seen = cause_run
    rec = read_csv(path)
    assert rec["t_s"].tolist() == [s.t_s for s in seen]
    assert rec["cause"].tolist() == [_word(s.cause) for s in seen]
    assert rec["bound"].tolist() == [_word(s.shaped.bound) for s in seen]
    assert set(rec["cause"]) == {"", "operator", "deadman", "UI stall"}     # the run holds every one of them


def test_each_stop_carries_the_scripts_cause_from_its_first_row(cause_run) -> None:
    """Operator stop: the cycle after the call. Deadman: the first cycle more than operator_timeout_s after the cycle
    that took the last keep-alive (the one at the silence's start; at the timeout itself, floating-point rounding of
    the times decides). UI stall: likewise after the last heartbeat, replacing the deadman stop in force (the state
    stays `stopping`). Empty while armed; the cause stays with the stopped robot until it is armed again."""
    path, _ = cause_run
    rec = read_csv(path)
    t, state, cause = rec["t_s"], rec["state"], rec["cause"]
    stops = [i for i in range(1, t.size) if state[i] == "stopping" and state[i - 1] != "stopping"]
    assert [cause[i] for i in stops] == ["operator", "deadman", "deadman"]
    s = CAUSE_SCENE
    assert t[stops[0]] == pytest.approx(s.operator_stop_s + PERIOD_S)
    for i, silent in zip(stops[1:], (s.silent_operator_s, s.silent_all_s)):
        assert t[i] == pytest.approx(silent + s.operator_timeout_s + PERIOD_S / 2, abs=PERIOD_S * 0.51)
    stall = next(i for i in range(stops[2], t.size) if cause[i] == "UI stall")
    assert t[stall] == pytest.approx(s.silent_all_s + s.ui_timeout_s + PERIOD_S / 2, abs=PERIOD_S * 0.51)
    assert state[stall] == state[stall - 1] == "stopping"
    assert set(cause[state == "armed"]) == {""} and set(cause[state == "disarmed"]) == {""}
    assert cause[-1] == "UI stall" and state[-1] == "stopped"


def test_the_bound_column_names_the_ramp_limit_the_output_follows(cause_run) -> None:
    """Where `accel` binds, the recorded speed changes at the acceleration limit; where `jerk` binds, the
    acceleration changes at the jerk limit: accel_mps2 and jerk_mps3 speeding up, decel_mps2 and jerk_mps3 in a
    controlled stop (operator, deadman), stop_decel_mps2 and stop_jerk_mps3 in a fast one (UI stall: the stop kinds
    of the cause table in docs/control-loop.md). The limits are the TOML's; v(t) = v0 + a t and a(t) = a0 + j t are
    the constant-acceleration and constant-jerk phases of a jerk-limited ("double S") ramp: L. Biagiotti,
    C. Melchiorri, Trajectory Planning for Automatic Machines and Robots, Springer 2008, section 3.4 (section number
    from memory). Central differences are exact on those."""
    path, _ = cause_run
    rec = read_csv(path)
    t, v, cause = rec["t_s"], rec["v_mps"], rec["cause"]
    ramp = {"": ("accel_mps2", "jerk_mps3"), "operator": ("decel_mps2", "jerk_mps3"),
            "deadman": ("decel_mps2", "jerk_mps3"), "UI stall": ("stop_decel_mps2", "stop_jerk_mps3")}
    checked = set()
    for first, end, name in _runs(rec["bound"], cause):
        if name not in ("accel", "jerk") or end - first < 5:
            continue
        accel_key, jerk_key = ramp[str(cause[first])]
        if name == "accel":                         # inner rows: a phase's edge rows mix two phases
            a = np.gradient(v[first:end], t[first:end])[1:-1]
            np.testing.assert_allclose(np.abs(a), LIMITS[accel_key], rtol=1e-6)
        else:
            jerk = np.diff(v[first - 1:end + 1], 2)[1:-1] / PERIOD_S ** 2
            np.testing.assert_allclose(np.abs(jerk), LIMITS[jerk_key], rtol=1e-6)
        checked.add((name, str(cause[first])))
    assert checked >= {("accel", ""), ("jerk", ""), ("accel", "deadman"), ("jerk", "deadman"),
                       ("accel", "UI stall")}


def test_replay_shows_the_recorded_cause_and_bound_at_every_row(cause_run) -> None:
    path, seen = cause_run
    replay = open_replay(path)
    assert replay.missing == ()
    for row, snap in enumerate(seen):
        shown = replay.snapshot(row)
        assert (shown.cause, shown.shaped.bound) == (snap.cause, snap.shaped.bound), row


def test_replays_stop_events_are_the_loops_with_their_causes(cause_run) -> None:
    """The loop's log says `<kind> stop (<cause>)` at each stop it took; replay lists the same stops, at the same
    times, with the same causes (a replaced stop included)."""
    path, seen = cause_run
    loop_stops = [(e.t_s, e.text.split("(")[1].split(")")[0]) for e in seen[-1].events
                  if e.kind == "safety" and " stop (" in e.text]
    replay = open_replay(path)
    stops = [m.event for m in replay.marks if m.event.kind == "stop"]
    assert [(e.t_s, e.text.split("(")[1].split(")")[0]) for e in stops] == loop_stops
    assert [c for _, c in loop_stops] == ["operator", "deadman", "deadman", "UI stall"]
    assert stops[-1].text == "stop (UI stall); replaces the stop in force"
    assert [what for _, what, _ in notable_moments(path)] == [e.text for e in stops]


def test_replays_limit_events_are_the_ones_the_loop_logged(cause_run) -> None:
    """The same texts in the same order; replay puts each at the row where the limit began, the loop logged it once
    the limit had held LIMIT_EVENT_HOLD_S."""
    path, seen = cause_run
    logged = [e for e in seen[-1].events if e.kind == "limit"]
    replayed = [m.event for m in open_replay(path).marks if m.event.kind == "limit"]
    assert [e.text for e in replayed] == [e.text for e in logged]
    assert "limit: speed clips the request" in [e.text for e in logged]
    for mine, theirs in zip(replayed, logged):
        assert theirs.t_s - mine.t_s == pytest.approx(LIMIT_EVENT_HOLD_S, abs=PERIOD_S / 2)


def test_limit_jumps_visit_every_recorded_change_the_ramp_limits_too(cause_run) -> None:
    path, _ = cause_run
    rec = read_csv(path)
    replay = open_replay(path)
    landed, row = [], 0
    while (row := replay.next_mark(row, "limit")) is not None:
        landed.append(row)
    assert all(rec["bound"][row] != rec["bound"][row - 1] for row in landed)
    assert {str(rec["bound"][row]) for row in landed} == {"", "accel", "jerk", "speed"}
    expected, last = [], ""                     # from the first row on: no limit so far
    for a, z, name in _runs(rec["bound"]):
        if name != last and rec["t_s"][z - 1] - rec["t_s"][a] >= LIMIT_EVENT_HOLD_S:    # held that long: a change
            expected.append(a)
            last = name
    assert landed == expected


async def test_the_screen_shows_the_recorded_cause_and_limit(cause_run) -> None:
    path, seen = cause_run
    stall = next(s for s in seen if s.cause is StopCause.UI_STALL)
    app, _ = make_app(path, at_s=stall.t_s)
    async with app.run_test(size=(120, 40)) as pilot:
        await pilot.pause()
        assert "cause: UI stall" in text_of(app, SafetyBanner)
        assert "stop (UI stall); replaces the stop in force" in text_of(app, EventLog)
        await pilot.press("home", "l", "l")
        assert seen[app.row].shaped.bound is not None
        assert f"{seen[app.row].shaped.bound.value.upper()} LIMIT" in text_of(app, LimitPanel)


def test_an_older_recording_replays_and_reports_with_todays_derivation(cause_run, tmp_path: Path,
                                                                       capsys) -> None:
    """Without the columns: the causes the flags do not name are "cause not recorded", the binding limit is the
    envelope's (never a ramp limit), both said on opening; the report reads both formats alike."""
    path, _ = cause_run
    old = old_format(path, tmp_path / "old.csv")
    replay = open_replay(old)
    assert any("no cause column" in m for m in replay.missing) and any("no bound column" in m for m in replay.missing)
    stops = [m.event.text for m in replay.marks if m.event.kind == "stop"]
    assert stops == ["stop (cause not recorded); ramping down"] * 3
    bounds = {None if replay.snapshot(row).shaped.bound is None else replay.snapshot(row).shaped.bound.value
              for row in range(0, replay.rows, 7)}
    assert bounds == {None, "speed"}
    assert replay.snapshot(replay.rows - 1).cause is None
    for recording in (path, old):
        assert main(["report", str(recording), "-o", str(tmp_path / f"report-{recording.stem}")]) == 0
    out = capsys.readouterr().out
    commands = [line for line in out.splitlines() if "diffdeck replay" in line]
    assert len(commands) == 4 + 3 and "stop (UI stall)" in out and "cause not recorded" in out
