"""`diffdeck shape` on traces that once broke a limit or stopped short: every row is checked against the limits
written out from the kinematics, and the last row must be the enveloped target, at rest in acceleration.

Kinematics (unicycle model of a differential drive): wheel rate (v -+ omega W / 2) / r, wheel acceleration
(a -+ alpha W / 2) / r, sideways acceleration |v x omega|. Siegwart, Nourbakhsh and Scaramuzza, Introduction to
Autonomous Mobile Robots, 2nd ed., MIT Press 2011, ch. 3 (from memory).
"""

from __future__ import annotations

import csv
import math
from pathlib import Path

import pytest

from console.cli import main

WREN = Path(__file__).resolve().parents[2] / "profiles" / "wren.toml"
REL = 1e-9

FAST_WIDE = """\
[robot]
name = "re-plan on a wide, fast base"
[geometry]
wheel_radius_m = 0.2
track_width_m = 0.6
[limits]
speed_mps = 10
turn_rate_radps = 10
accel_mps2 = 3.3
decel_mps2 = 6.4
jerk_mps3 = 4.4
turn_accel_radps2 = 3.0
turn_jerk_radps3 = 5.0
sideways_accel_mps2 = 1.7
wheel_rate_radps = 60
stop_decel_mps2 = 10
"""

GEARBOX_LIMITED = """\
[robot]
name = "wheel acceleration shared by both axes"
[geometry]
wheel_radius_m = 0.1
track_width_m = 0.5
[limits]
speed_mps = 1.5
turn_rate_radps = 6
accel_mps2 = 1
jerk_mps3 = 20
turn_accel_radps2 = 4
turn_jerk_radps3 = 20
wheel_rate_radps = 20
wheel_accel_radps2 = 10
stop_decel_mps2 = 1
"""


def shaped_rows(tmp_path: Path, profile: Path, trace: str) -> list[dict[str, str]]:
    requests, out = tmp_path / "requests.csv", tmp_path / "out.csv"
    requests.write_text("t_s,v_mps,omega_radps\n" + trace)
    assert main(["shape", str(profile), str(requests), "-o", str(out)]) == 0
    with out.open(newline="") as handle:
        return list(csv.DictReader(handle))


def excesses(rows: list[dict[str, str]], r: float, track: float, limits: dict[str, float]) -> list[str]:
    """Every row and limit where the command goes beyond the limit (beyond rounding)."""
    found = []
    for row in rows:
        v, w = float(row["v_mps"]), float(row["omega_radps"])
        a, alpha = float(row["a_mps2"]), float(row["alpha_radps2"])
        measured = {
            "wheel_rate": max(abs(v - w * track / 2), abs(v + w * track / 2)) / r,
            "wheel_rate_column": max(abs(float(row["left_radps"])), abs(float(row["right_radps"]))),
            "sideways": abs(v * w),
            "wheel_accel": max(abs(a - alpha * track / 2), abs(a + alpha * track / 2)) / r,
            "speed": abs(v),
            "turn_rate": abs(w),
        }
        for name, value in measured.items():
            limit = limits.get(name.removesuffix("_column"))
            if limit is not None and value > limit * (1 + REL):
                found.append(f"t={row['t_s']} {name} {value:.6g} > {limit:g}")
    return found


def test_a_replan_from_an_arc_keeps_the_sideways_and_wheel_rate_limits(tmp_path: Path) -> None:
    profile = tmp_path / "robot.toml"
    profile.write_text(FAST_WIDE)
    rows = shaped_rows(tmp_path, profile, "0,0.5,1.0\n0.5,10,0\n1.2,-10,0\n")
    limits = {"wheel_rate": 60.0, "sideways": 1.7, "speed": 10.0, "turn_rate": 10.0}
    assert excesses(rows, 0.2, 0.6, limits) == []
    # where the command runs along the sideways limit, that is the limit named as binding
    edge = [row for row in rows if abs(float(row["v_mps"]) * float(row["omega_radps"])) >= 0.999 * 1.7]
    assert all(row["bound"] == "sideways accel" for row in edge)
    last = rows[-1]
    assert (float(last["v_mps"]), float(last["omega_radps"]), float(last["a_mps2"])) == (-10.0, 0.0, 0.0)


def test_a_retarget_while_the_other_axis_accelerates_keeps_the_wheel_acceleration(tmp_path: Path) -> None:
    profile = tmp_path / "robot.toml"
    profile.write_text(GEARBOX_LIMITED)
    rows = shaped_rows(tmp_path, profile, "0,0,3\n0.4,0.5,3\n")
    assert excesses(rows, 0.1, 0.5, {"wheel_accel": 10.0, "wheel_rate": 20.0, "speed": 1.5, "turn_rate": 6.0}) == []
    # the limit does bind: some row uses all of it
    peak = max(max(abs(float(row["a_mps2"]) - float(row["alpha_radps2"]) * 0.25),
                   abs(float(row["a_mps2"]) + float(row["alpha_radps2"]) * 0.25)) / 0.1 for row in rows)
    assert peak == pytest.approx(10.0, rel=1e-6)
    last = rows[-1]
    assert (float(last["v_mps"]), float(last["omega_radps"])) == (0.5, 3.0)


def test_shape_runs_until_the_output_is_at_the_enveloped_target(tmp_path: Path) -> None:
    rows = shaped_rows(tmp_path, WREN, "0,0.5,-3.8\n0.61,1.1,0.1\n")
    # wren: speed_mps = 1.0 scales (1.1, 0.1) by 1 / 1.1; the wheels (16.4 rad/s of 20) and the sideways limit
    # (0.09 of 0.9 m/s^2) leave it there
    target = (1.0, 0.1 / 1.1)
    last = rows[-1]
    assert math.isclose(float(last["v_mps"]), target[0], rel_tol=1e-9)
    assert math.isclose(float(last["omega_radps"]), target[1], rel_tol=1e-9)
    assert (float(last["a_mps2"]), float(last["alpha_radps2"])) == (0.0, 0.0)
    # and not before: the row before the last is still on its way
    before = rows[-2]
    assert (float(before["v_mps"]), float(before["omega_radps"])) != (float(last["v_mps"]), float(last["omega_radps"]))


def test_the_wheel_acceleration_limit_binds_on_the_demo_rover_in_ordinary_driving(tmp_path: Path) -> None:
    # profiles/bramble.toml: r = 0.165 m, W = 0.62 m, wheel_accel_radps2 = 6; speed up, then steer while speeding up
    rows = shaped_rows(tmp_path, WREN.with_name("bramble.toml"),
                       "0,1.2,0\n2.5,1.2,0.5\n5,1.2,-0.5\n8,0.6,0.8\n12,0,0\n")
    assert excesses(rows, 0.165, 0.62, {"wheel_accel": 6.0}) == []
    at_limit = [row for row in rows if max(
        abs(float(row["a_mps2"]) - float(row["alpha_radps2"]) * 0.31),
        abs(float(row["a_mps2"]) + float(row["alpha_radps2"]) * 0.31)) / 0.165 >= 6.0 * 0.999]
    assert at_limit, "the wheel-acceleration limit never binds"
    assert any(row["bound"] == "wheel accel" for row in at_limit)
