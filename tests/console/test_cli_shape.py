"""`diffdeck shape`: the offline preview through the real entry point; output checked against formulas, bad input
against the one-line rule, and `-o` against the nothing-half-written rule.

Sources:
- [K] differential-drive kinematics, left = (v - omega W / 2) / r, right = (v + omega W / 2) / r (Siegwart,
  Nourbakhsh and Scaramuzza, Introduction to Autonomous Mobile Robots, 2nd ed., MIT Press 2011, ch. 3).
- [S] rest-to-rest (in acceleration) jerk-limited velocity change: T = dv / a + a / j when dv >= a^2 / j, else
  T = 2 sqrt(dv / j) (Biagiotti and Melchiorri, Trajectory Planning for Automatic Machines and Robots, Springer
  2008, sec. 3.4, double-S profile, acceleration phase).
"""

from __future__ import annotations

import csv
import io
import math
from pathlib import Path

import pytest

from console.cli import main
from console.profile import load_profile
from console.verbs.shape import OUTPUT_HEADER

WREN = Path(__file__).resolve().parents[2] / "profiles" / "wren.toml"
PROFILE = load_profile(WREN)


def s_curve_time(dv: float, accel: float, jerk: float) -> float:
    """[S]"""
    return dv / accel + accel / jerk if dv >= accel * accel / jerk else 2.0 * math.sqrt(dv / jerk)


def shape(tmp_path: Path, capsys: pytest.CaptureFixture[str], text: str, *options: str) -> list[dict[str, str]]:
    requests = tmp_path / "requests.csv"
    requests.write_text(text)
    assert main(["shape", str(WREN), str(requests), *options]) == 0
    captured = capsys.readouterr()
    assert captured.err == ""
    assert captured.out.splitlines()[0] == ",".join(OUTPUT_HEADER)
    return list(csv.DictReader(io.StringIO(captured.out)))


def column(rows: list[dict[str, str]], name: str) -> list[float]:
    return [float(row[name]) for row in rows]


def arrival(rows: list[dict[str, str]], name: str, target: float) -> float:
    """First time the column is within 1e-9 of the target and stays there."""
    values, times = column(rows, name), column(rows, "t_s")
    index = max(i for i, value in enumerate(values) if abs(value - target) > 1e-9) + 1
    return times[index]


def test_step_from_rest_reaches_top_speed_in_the_s_curve_time(tmp_path: Path,
                                                              capsys: pytest.CaptureFixture[str]) -> None:
    limits, r = PROFILE.limits, PROFILE.geometry.wheel_radius_m
    rows = shape(tmp_path, capsys, "t_s,v_mps,omega_radps\n0,1.0,0\n")
    period = 0.01
    times = column(rows, "t_s")
    assert times == pytest.approx([period * (k + 1) for k in range(len(rows))], abs=1e-12)
    expected = s_curve_time(1.0, limits.accel_mps2, limits.jerk_mps3)
    assert abs(arrival(rows, "v_mps", 1.0) - expected) <= period + 1e-9
    assert times[-1] - expected <= period + 1e-9  # stops sampling once settled
    assert max(column(rows, "a_mps2")) <= limits.accel_mps2 + 1e-9
    last = rows[-1]
    assert float(last["left_radps"]) == float(last["right_radps"]) == pytest.approx(1.0 / r)  # [K] straight line


def test_held_requests_switch_at_their_row_time_and_start_from_rest(tmp_path: Path,
                                                                     capsys: pytest.CaptureFixture[str]) -> None:
    rows = shape(tmp_path, capsys, "t_s,v_mps,omega_radps\n0.5,0.3,0\n1.25,0,0.8\n")
    for row in rows:
        t = float(row["t_s"])
        expected = (0.0, 0.0) if t < 0.5 - 1e-9 else (0.3, 0.0) if t < 1.25 - 1e-9 else (0.0, 0.8)
        assert (float(row["v_req_mps"]), float(row["omega_req_radps"])) == expected, t
        if t < 0.5 - 1e-9:
            assert float(row["v_mps"]) == float(row["omega_radps"]) == 0.0
    assert float(rows[-1]["v_mps"]) == pytest.approx(0.0, abs=1e-12)
    assert float(rows[-1]["omega_radps"]) == pytest.approx(0.8)


def test_wheel_columns_follow_the_kinematics(tmp_path: Path, capsys: pytest.CaptureFixture[str]) -> None:
    r, width = PROFILE.geometry.wheel_radius_m, PROFILE.geometry.track_width_m
    rows = shape(tmp_path, capsys, "t_s,v_mps,omega_radps\n0,0.6,0.7\n2,-0.3,-1.5\n4,0,2.0\n")
    for row in rows:
        v, omega = float(row["v_mps"]), float(row["omega_radps"])
        assert float(row["left_radps"]) == pytest.approx((v - omega * width / 2) / r, rel=1e-8, abs=1e-8)  # [K]
        assert float(row["right_radps"]) == pytest.approx((v + omega * width / 2) / r, rel=1e-8, abs=1e-8)  # [K]


def test_arc_from_rest_synced_keeps_curvature_independent_is_time_optimal_per_axis(
        tmp_path: Path, capsys: pytest.CaptureFixture[str]) -> None:
    """v 0.5 m/s and omega 0.5 rad/s from rest are inside every wren limit, wheel accelerations included."""
    limits = PROFILE.limits
    text = "t_s,v_mps,omega_radps\n0,0.5,0.5\n"
    synced = shape(tmp_path, capsys, text)
    for row in synced:
        v, omega = float(row["v_mps"]), float(row["omega_radps"])
        assert omega == pytest.approx(v * 1.0, rel=1e-6, abs=1e-12)  # curvature 1 /m from the first sample on
    speed_time = s_curve_time(0.5, limits.accel_mps2, limits.jerk_mps3)
    turn_time = s_curve_time(0.5, limits.turn_accel_radps2, limits.turn_jerk_radps3)
    assert abs(arrival(synced, "omega_radps", 0.5) - max(speed_time, turn_time)) <= 0.01 + 1e-9
    independent = shape(tmp_path, capsys, text, "--mode", "independent")
    assert abs(arrival(independent, "omega_radps", 0.5) - turn_time) <= 0.01 + 1e-9
    assert abs(arrival(independent, "v_mps", 0.5) - speed_time) <= 0.01 + 1e-9


def test_request_beyond_the_envelope_is_held_as_asked_and_shaped_to_the_limit(
        tmp_path: Path, capsys: pytest.CaptureFixture[str]) -> None:
    rows = shape(tmp_path, capsys, "t_s,v_mps,omega_radps\n0,5.0,0\n")
    assert float(rows[-1]["v_req_mps"]) == 5.0
    assert float(rows[-1]["v_mps"]) == pytest.approx(PROFILE.limits.speed_mps)
    assert rows[-1]["bound"] == "speed"


def test_rate_until_and_output_file(tmp_path: Path, capsys: pytest.CaptureFixture[str]) -> None:
    text = "t_s,v_mps,omega_radps\n0,0.4,0\n"
    rows = shape(tmp_path, capsys, text, "--rate-hz", "50", "--until-s", "3")
    assert len(rows) == 150
    assert column(rows, "t_s") == pytest.approx([(k + 1) / 50 for k in range(150)], abs=1e-12)
    out = tmp_path / "out.csv"
    assert main(["shape", str(WREN), str(tmp_path / "requests.csv"), "--rate-hz", "50", "--until-s", "3",
                 "-o", str(out)]) == 0
    assert capsys.readouterr().out == ""
    assert list(csv.DictReader(out.open())) == rows
    assert sorted(p.name for p in tmp_path.iterdir()) == ["out.csv", "requests.csv"]


def test_blank_lines_are_skipped_and_line_numbers_stay_physical(tmp_path: Path,
                                                                 capsys: pytest.CaptureFixture[str]) -> None:
    requests = tmp_path / "requests.csv"
    requests.write_text("t_s,v_mps,omega_radps\n0,0.2,0\n\n\n1,x,0\n")
    assert main(["shape", str(WREN), str(requests)]) == 2
    assert capsys.readouterr().err == f"diffdeck: {requests}, line 5: v_mps = 'x': a finite number\n"


HEADER = "t_s,v_mps,omega_radps\n"
BAD = [
    ("", "line 1", "header = ''", "exactly t_s,v_mps,omega_radps"),
    ("time,v,omega\n0,1,0\n", "line 1", "header = 'time,v,omega'", "exactly t_s,v_mps,omega_radps"),
    (HEADER, "", "rows = '(none)'", "at least one request row after the header"),
    (HEADER + "0,fast,0\n", "line 2", "v_mps = 'fast'", "a finite number"),
    (HEADER + "0,0.5,nan\n", "line 2", "omega_radps = 'nan'", "a finite number"),
    (HEADER + "inf,0.5,0\n", "line 2", "t_s = 'inf'", "a finite number"),
    (HEADER + "0,0.5\n", "line 2", "row = '0,0.5'", "3 fields: t_s,v_mps,omega_radps"),
    (HEADER + "0,0.5,0,1\n", "line 2", "row = '0,0.5,0,1'", "3 fields"),
    (HEADER + "-1,0.5,0\n", "line 2", "t_s = '-1'", "a time in s at least 0"),
    (HEADER + "0,0.5,0\n2,0,0\n2,1,0\n", "line 4", "t_s = '2'", "greater than the previous row's 2"),
    (HEADER + "0,0.5,0\n2,0,0\n1.5,1,0\n", "line 4", "t_s = '1.5'", "times must increase"),
]


@pytest.mark.parametrize(("text", "line", "shown", "allowed"), BAD, ids=[case[2] for case in BAD])
def test_bad_trace_gives_one_line_exit_2_and_leaves_the_output_alone(
        tmp_path: Path, capsys: pytest.CaptureFixture[str], text: str, line: str, shown: str, allowed: str) -> None:
    requests = tmp_path / "requests.csv"
    requests.write_text(text)
    out = tmp_path / "out.csv"
    out.write_text("previous result\n")
    assert main(["shape", str(WREN), str(requests), "-o", str(out)]) == 2
    captured = capsys.readouterr()
    where = f"{requests}, {line}" if line else str(requests)
    assert captured.out == ""
    assert captured.err.startswith(f"diffdeck: {where}: {shown}: "), captured.err
    assert allowed in captured.err and captured.err.count("\n") == 1
    assert out.read_text() == "previous result\n"
    assert sorted(p.name for p in tmp_path.iterdir()) == ["out.csv", "requests.csv"]


@pytest.mark.parametrize(("options", "message"), [
    (["--rate-hz", "5"], "command line: --rate-hz = 5.0: a number from 10 to 1000 (Hz)"),
    (["--rate-hz", "nan"], "command line: --rate-hz = nan: a number from 10 to 1000 (Hz)"),
    (["--until-s", "0"], "command line: --until-s = 0.0: a time greater than 0 and at most 86400 s (24 h)"),
])
def test_bad_options(tmp_path: Path, capsys: pytest.CaptureFixture[str], options: list[str], message: str) -> None:
    requests = tmp_path / "requests.csv"
    requests.write_text(HEADER + "0,0.5,0\n")
    assert main(["shape", str(WREN), str(requests), *options]) == 2
    assert capsys.readouterr().err == f"diffdeck: {message}\n"


def test_output_into_a_missing_folder_and_a_missing_trace(tmp_path: Path, capsys: pytest.CaptureFixture[str]) -> None:
    requests = tmp_path / "requests.csv"
    requests.write_text(HEADER + "0,0.5,0\n")
    target = tmp_path / "nowhere" / "out.csv"
    assert main(["shape", str(WREN), str(requests), "-o", str(target)]) == 6
    assert capsys.readouterr().err == f"diffdeck: {target}: the folder {target.parent} does not exist\n"
    missing = tmp_path / "missing.csv"
    assert main(["shape", str(WREN), str(missing)]) == 2
    assert capsys.readouterr().err.startswith(f"diffdeck: {missing}: file = {str(missing)!r}: no such file")


def test_bad_profile_is_reported_before_anything_is_written(tmp_path: Path,
                                                             capsys: pytest.CaptureFixture[str]) -> None:
    profile = tmp_path / "robot.toml"
    profile.write_text(WREN.read_text().replace("speed_mps = 1.0", "speed_mps = 0"))
    requests = tmp_path / "requests.csv"
    requests.write_text(HEADER + "0,0.5,0\n")
    out = tmp_path / "out.csv"
    assert main(["shape", str(profile), str(requests), "-o", str(out)]) == 2
    assert capsys.readouterr().err.startswith(f"diffdeck: {profile}: limits.speed_mps = 0: ")
    assert not out.exists()


TRACES = sorted((Path(__file__).resolve().parents[2] / "profiles" / "traces").glob("*.csv"))


@pytest.mark.parametrize("trace", TRACES, ids=[t.name for t in TRACES])
def test_each_example_trace_shapes_on_its_profile_and_ends_at_rest(trace: Path, tmp_path: Path) -> None:
    profile_path = trace.parents[1] / f"{trace.name.split('-')[0]}.toml"
    envelope = load_profile(profile_path).envelope
    out = tmp_path / "shaped.csv"
    assert main(["shape", str(profile_path), str(trace), "-o", str(out)]) == 0
    requests = list(csv.DictReader(io.StringIO(trace.read_text())))
    # within the envelope as asked (an example should not lean on saturation), and the last request is rest
    for row in requests:
        v, omega = float(row["v_mps"]), float(row["omega_radps"])
        assert -envelope.top_reverse_speed_mps <= v <= envelope.top_speed_mps, row
        assert abs(omega) <= envelope.max_turn_rate_at(v) + 1e-9, row
    assert float(requests[-1]["v_mps"]) == 0.0 and float(requests[-1]["omega_radps"]) == 0.0
    last = list(csv.DictReader(io.StringIO(out.read_text())))[-1]
    assert float(last["v_mps"]) == 0.0 and float(last["omega_radps"]) == 0.0
    assert len(TRACES) >= 2
