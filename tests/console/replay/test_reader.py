"""The replay index on recordings the real loop made: events where the script put them, the row values as recorded,
what older, truncated and sidecar-less recordings lack, and one line (exit 2) for what is not a recording.

The expected values come from outside the replay: the scene's script (conftest.SCENE), the profile's TOML read with
tomllib, the CSV read with the recorder's own plain reader (console.record.read_csv, a csv-per-line reader unrelated
to the replay's numpy parse), and the simulated robot's true pose.
"""

from __future__ import annotations

import json
import math
import shutil
import tomllib
from pathlib import Path

import numpy as np
import pytest

from console import replay as replay_module
from console.cli import main
from console.core.safety import SafetyState, StopCause
from console.errors import InputError
from console.record import read_csv, sidecar_path
from console.replay import notable_moments, open_replay, replay_command
from tests.console.replay.conftest import BRAMBLE, SCENE, WREN, old_format, without_columns

PERIOD_S = 0.01     # wren's [link] rate_hz = 100


def _events(replay, kind: str) -> list[tuple[float, str]]:
    return [(m.event.t_s, m.event.text) for m in replay.marks if m.event.kind == kind]


def test_events_are_where_the_script_put_them(scene_recording: Path) -> None:
    replay = open_replay(scene_recording)
    armed = [t for t, text in _events(replay, "safety") if text == "armed"]
    # the loop takes a call at the start of its next cycle: one period after the script's time
    assert armed == pytest.approx([SCENE.armed_s + PERIOD_S, SCENE.rearm_s + PERIOD_S], abs=PERIOD_S / 2)
    stops = _events(replay, "stop")
    assert [t for t, _ in stops][0] == pytest.approx(SCENE.stop_s + PERIOD_S, abs=PERIOD_S / 2)
    assert stops[0][1] == "stop (operator); ramping down"  # the script's StopCause.OPERATOR, in the cause column
    # the fault: the firmware reports it in its next telemetry (wren: 50 Hz, so within 20 ms + one period)
    fault_t, fault_text = _events(replay, "fault")[0]
    assert SCENE.fault_s < fault_t <= SCENE.fault_s + 0.02 + PERIOD_S and "FAULT" in fault_text
    assert stops[1][0] == pytest.approx(fault_t, abs=PERIOD_S) and "fault" in stops[1][1]
    limit = _events(replay, "limit")
    assert limit[0][0] == pytest.approx(SCENE.beyond_s + PERIOD_S, abs=PERIOD_S / 2)
    assert limit[0][1] == "limit: speed clips the request"
    assert replay.missing == ()


def test_a_row_shows_the_recorded_values(scene_recording: Path) -> None:
    replay = open_replay(scene_recording)
    rec = read_csv(scene_recording)
    assert replay.rows == rec["t_s"].size
    for row in np.random.default_rng(3).integers(0, replay.rows, 40).tolist():
        snap = replay.snapshot(row)
        s = snap.shaped
        assert snap.t_s == rec["t_s"][row]
        assert (s.v_req_mps, s.omega_req_radps, s.v_mps, s.omega_radps) == (
            rec["v_req_mps"][row], rec["omega_req_radps"][row], rec["v_mps"][row], rec["omega_radps"][row])
        assert (s.left_radps, s.right_radps) == (rec["left_cmd_radps"][row], rec["right_cmd_radps"][row])
        meas = rec["left_meas_radps"][row]
        assert (snap.left_meas_radps is None) if math.isnan(meas) else snap.left_meas_radps == meas
        assert snap.state is SafetyState(rec["state"][row])
        assert snap.flags == rec["flags"][row]
        assert snap.pose == (rec["x_m"][row], rec["y_m"][row], rec["heading_rad"][row])


def test_without_a_bound_column_the_binding_limit_is_the_profiles_envelope_on_the_request(
        scene_recording: Path, tmp_path: Path) -> None:
    """An older recording: 1.6 m/s straight ahead is beyond wren's top speed: the target is that limit, read from
    the TOML itself; with --profile bramble it is bramble's (a straight line: no turn or sideways share, so the speed
    limit, or the wheel-rate limit times the wheel radius where that is lower); a limit binds only where the request
    is beyond. With the bound column the limit shown is the recorded one, whatever the profile."""
    old = old_format(scene_recording, tmp_path / "old.csv")
    row = open_replay(old).row_at(SCENE.beyond_s + 1.0)
    for profile in (None, BRAMBLE):
        replay = open_replay(old, profile)
        snap = replay.snapshot(row)
        toml = tomllib.loads((profile or WREN).read_text(encoding="utf-8"))
        top = min(toml["limits"]["speed_mps"], toml["limits"]["wheel_rate_radps"] * toml["geometry"]["wheel_radius_m"])
        assert snap.shaped.v_req_mps == SCENE.beyond_mps
        assert snap.shaped.v_target_mps == pytest.approx(min(SCENE.beyond_mps, top))
        assert (snap.shaped.bound is not None) == (SCENE.beyond_mps > top)
        assert any("no bound column" in m for m in replay.missing)
        assert open_replay(scene_recording, profile).snapshot(row).shaped.bound.value == \
            read_csv(scene_recording)["bound"][row]
    assert open_replay(old, BRAMBLE).profile_source == f"--profile {BRAMBLE}"


def test_a_fault_stop_carries_its_cause(scene_recording: Path) -> None:
    replay = open_replay(scene_recording)
    snap = replay.snapshot(replay.row_at(SCENE.fault_s + 0.5))
    assert snap.state is SafetyState.STOPPED and snap.cause is StopCause.FAULT


def test_dead_reckoning_follows_the_true_pose_when_no_pose_was_recorded(scene_recording: Path, tmp_path: Path) -> None:
    """Without the pose columns (a real robot), the top view integrates the measured wheel rates; on the simulated
    robot with exact geometry (wren: wheel_radius_ratio = track_width_scale = 1) that must land near the true pose
    the plant recorded: within 2 % of the way travelled (measurement noise and 20 ms telemetry steps)."""
    rec = read_csv(scene_recording)
    stripped = without_columns(scene_recording, tmp_path / "real.csv", ("x_m", "y_m", "heading_rad"))
    shutil.copy(sidecar_path(scene_recording), sidecar_path(stripped))
    replay = open_replay(stripped)
    assert not replay.true_pose and any("dead reckoning" in m for m in replay.missing)
    x, y = rec["x_m"], rec["y_m"]
    travelled = float(np.sum(np.hypot(np.diff(x), np.diff(y))))
    end = replay.poses(replay.rows - 1, replay.rows - 1)[0]
    assert math.hypot(end[0] - x[-1], end[1] - y[-1]) < 0.02 * travelled


def test_an_old_recording_without_flags_replays_and_says_so(scene_recording: Path, tmp_path: Path) -> None:
    old = old_format(scene_recording, tmp_path / "old.csv", ("flags", "cause", "bound"))
    replay = open_replay(old)
    assert any("no flags column" in m for m in replay.missing)
    assert _events(replay, "fault") == [] and len(_events(replay, "stop")) == 2
    assert replay.snapshot(replay.rows - 1).cause is None


def test_a_killed_run_replays_as_far_as_it_goes(scene_recording: Path, tmp_path: Path, capsys) -> None:
    """A killed run: no sidecar, and the last line cut in the middle. With the profile given it opens up to the
    last whole row and says both; without a profile it says, in one line, what to give."""
    data = scene_recording.read_bytes()
    cut = tmp_path / "killed.csv"
    cut.write_bytes(data[: len(data) // 2])
    whole_lines = cut.read_bytes().count(b"\n") - 1
    replay = open_replay(cut, WREN)
    assert replay.rows == whole_lines
    assert any("cut off" in m for m in replay.missing) and any("no sidecar" in m for m in replay.missing)
    assert replay.url == "not recorded"
    assert main(["replay", str(cut)]) == 2
    err = capsys.readouterr().err.strip().splitlines()
    assert len(err) == 1 and "killed.csv.json" in err[0] and "--profile" in err[0]


HOSTILE = [
    ("trace.csv", b"t_s,v_mps,omega_radps\n0.0,0.4,0.0\n", "header"),
    ("noise.csv", bytes(range(256)) * 4, "header"),
    ("empty.csv", b"", "header"),
]


@pytest.mark.parametrize(("name", "content", "field"), HOSTILE)
def test_a_file_that_is_not_a_recording_is_one_line_exit_2(tmp_path: Path, capsys, name: str, content: bytes,
                                                           field: str) -> None:
    path = tmp_path / name
    path.write_bytes(content)
    assert main(["replay", str(path)]) == 2
    err = capsys.readouterr().err.strip().splitlines()
    assert len(err) == 1 and name in err[0] and field in err[0] and "t_s,v_req_mps" in err[0]


def _with_cell(source: Path, target: Path, line: int, field: int, value: str) -> Path:
    lines = source.read_text(encoding="utf-8").splitlines()
    fields = lines[line - 1].split(",")
    fields[field] = value
    lines[line - 1] = ",".join(fields)
    target.write_text("\n".join(lines) + "\n", encoding="utf-8")
    return target


def test_a_bad_cell_is_named_by_line_field_and_value(scene_recording: Path, tmp_path: Path, capsys) -> None:
    bad = _with_cell(scene_recording, tmp_path / "bad.csv", 6, 3, "fast")          # v_mps
    assert main(["replay", str(bad), "--profile", str(WREN)]) == 2
    err = capsys.readouterr().err.strip().splitlines()
    assert len(err) == 1 and "bad.csv" in err[0] and "line 6, v_mps" in err[0] and "'fast'" in err[0]
    _with_cell(scene_recording, bad, 8, 9, "cruising")                              # state
    with pytest.raises(InputError, match="line 8, state = 'cruising': one of"):
        open_replay(bad, WREN)
    header = scene_recording.read_text(encoding="utf-8").split("\n", 1)[0].split(",")
    _with_cell(scene_recording, bad, 9, header.index("cause"), "coffee")
    with pytest.raises(InputError, match="line 9, cause = 'coffee': empty or one of .*UI stall"):
        open_replay(bad, WREN)
    _with_cell(scene_recording, bad, 10, header.index("bound"), "JERK")
    with pytest.raises(InputError, match="line 10, bound = 'JERK': empty or one of .*jerk"):
        open_replay(bad, WREN)


def test_time_must_run_forward(scene_recording: Path, tmp_path: Path) -> None:
    lines = scene_recording.read_text(encoding="utf-8").splitlines()
    lines[10], lines[11] = lines[11], lines[10]
    bad = tmp_path / "backwards.csv"
    bad.write_text("\n".join(lines) + "\n", encoding="utf-8")
    with pytest.raises(InputError, match="line 12, t_s"):
        open_replay(bad, WREN)


def test_a_sidecar_of_another_kind_is_one_line(scene_recording: Path, tmp_path: Path, capsys) -> None:
    copy = tmp_path / "copy.csv"
    shutil.copy(scene_recording, copy)
    sidecar_path(copy).write_text(json.dumps({"format": "something else"}), encoding="utf-8")
    assert main(["replay", str(copy)]) == 2
    err = capsys.readouterr().err.strip().splitlines()
    assert len(err) == 1 and "copy.csv.json" in err[0] and "format" in err[0]


def test_at_outside_the_recording_is_one_line(scene_recording: Path, capsys) -> None:
    assert main(["replay", str(scene_recording), "--at", "99"]) == 2
    err = capsys.readouterr().err.strip().splitlines()
    assert len(err) == 1 and "--at" in err[0] and "10.500" in err[0]


def test_report_commands_open_the_replay_on_the_moment(scene_recording: Path) -> None:
    """Each printed command's --at lands on the row of the moment it names (its time rounded up to the ms)."""
    replay = open_replay(scene_recording)
    moments = notable_moments(scene_recording)
    assert [what for _, what, _ in moments][:1] == [_events(replay, "stop")[0][1]]
    assert len(moments) == 3          # the operator stop, the fault, the stop it brought
    for t_s, _, command in moments:
        at = float(command.rsplit("--at ", 1)[1])
        assert replay.row_at(at) == replay.row_at(t_s) and replay.t[replay.row_at(at)] == t_s
    assert replay_command(Path("runs/a b.csv"), 1.2345) == "diffdeck replay 'runs/a b.csv' --at 1.235"


def test_a_recording_with_a_single_row_opens(scene_recording: Path, tmp_path: Path) -> None:
    lines = scene_recording.read_text(encoding="utf-8").splitlines()[:2]
    short = tmp_path / "one.csv"
    short.write_text("\n".join(lines) + "\n", encoding="utf-8")
    replay = open_replay(short, WREN)
    assert replay.rows == 1 and replay.snapshot(0).state is SafetyState.DISARMED


def test_report_moments_need_no_sidecar_and_skip_what_is_not_a_recording(scene_recording: Path,
                                                                         tmp_path: Path) -> None:
    alone = tmp_path / "alone.csv"
    shutil.copy(scene_recording, alone)                      # no sidecar: no profile, the moments are still there
    assert [what for _, what, _ in notable_moments(alone)] == [what for _, what, _ in notable_moments(scene_recording)]
    trace = tmp_path / "trace.csv"
    trace.write_text("t_s,v_mps,omega_radps\n0.0,0.4,0.0\n", encoding="utf-8")
    assert notable_moments(trace) == []


def test_report_prints_the_replay_command_for_each_stop_and_fault(scene_recording: Path, tmp_path: Path,
                                                                   capsys) -> None:
    assert main(["report", str(scene_recording), "-o", str(tmp_path / "report")]) == 0
    out = capsys.readouterr().out
    lines = [line for line in out.splitlines() if "diffdeck replay" in line]
    assert len(lines) == 3 and lines[0].startswith(f"at {SCENE.stop_s + PERIOD_S:.2f} s stop")
    assert lines[0].endswith(f"diffdeck replay {scene_recording} --at {SCENE.stop_s + PERIOD_S:.3f}")


def test_a_bad_cell_further_on_is_named_when_its_rows_are_first_shown(scene_recording: Path, tmp_path: Path,
                                                                      monkeypatch: pytest.MonkeyPatch) -> None:
    """Rows are converted by blocks as they are first shown: the recording opens, its events are all there, and the
    bad cell is one line naming its line and field once its block is shown."""
    monkeypatch.setattr(replay_module, "BLOCK_ROWS", 128)
    bad = _with_cell(scene_recording, tmp_path / "late.csv", 902, 3, "fast")     # v_mps, row 900
    shutil.copy(sidecar_path(scene_recording), sidecar_path(bad))
    replay = open_replay(bad)
    assert len(replay.marks) == len(open_replay(scene_recording).marks)
    assert replay.snapshot(100).t_s == pytest.approx(1.01)
    with pytest.raises(InputError, match="late.csv: line 902, v_mps = 'fast'"):
        replay.snapshot(899)                        # its block: rows 896 to 1023


def test_a_run_with_no_telemetry_says_so(scene_recording: Path, tmp_path: Path) -> None:
    """No measured rates in any row (nothing answered): a real-robot recording (no pose) says it on opening."""
    lines = scene_recording.read_text(encoding="utf-8").splitlines()
    header = lines[0].split(",")
    meas = [header.index(name) for name in ("left_meas_radps", "right_meas_radps")]
    rows = [[("" if k in meas else cell) for k, cell in enumerate(line.split(","))] for line in lines[1:]]
    silent = without_columns(scene_recording, tmp_path / "full.csv", ())
    silent.write_text("\n".join([lines[0]] + [",".join(row) for row in rows]) + "\n", encoding="utf-8")
    real = without_columns(silent, tmp_path / "silent.csv", ("x_m", "y_m", "heading_rad"))
    replay = open_replay(real, WREN)
    assert any("no measured wheel rates" in m for m in replay.missing)
    assert replay.snapshot(500).left_meas_radps is None and replay.snapshot(500).pose is None
