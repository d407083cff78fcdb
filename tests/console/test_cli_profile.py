"""`diffdeck profile check`: the printed envelope against textbook formulas, computed here from the profile's numbers.

Sources used below:
- [K] differential-drive kinematics: v = r (wR + wL) / 2, omega = r (wR - wL) / W (Siegwart, Nourbakhsh and
  Scaramuzza, Introduction to Autonomous Mobile Robots, 2nd ed., MIT Press 2011, ch. 3, differential-drive forward
  kinematics); a wheel rolling without slip moves its rim at w r (common practice).
- [C] centripetal acceleration on a circle a = v^2 / R = v omega, radius R = v / omega (common practice).
- [S] jerk-limited velocity change dv from rest to rest in acceleration (an S-curve): with peak acceleration a and
  jerk j, T = dv / a + a / j when dv >= a^2 / j, else T = 2 sqrt(dv / j) (Biagiotti and Melchiorri, Trajectory
  Planning for Automatic Machines and Robots, Springer 2008, sec. 3.4, double-S profile, acceleration phase). The
  velocity curve is point-symmetric about its midpoint, so the distance is dv T / 2 (common practice).
"""

from __future__ import annotations

import json
import math
import tomllib
from pathlib import Path

import pytest

from console.cli import main

PROFILES = Path(__file__).resolve().parents[2] / "profiles"


def s_curve_time(dv: float, accel: float, jerk: float) -> float:
    """[S]"""
    return dv / accel + accel / jerk if dv >= accel * accel / jerk else 2.0 * math.sqrt(dv / jerk)


def check_json(path: Path, capsys: pytest.CaptureFixture[str]) -> dict:
    assert main(["profile", "check", str(path), "--json"]) == 0
    captured = capsys.readouterr()
    assert captured.err == ""
    return json.loads(captured.out)


def expected_figures(path: Path) -> dict[str, float | None]:
    data = tomllib.loads(path.read_text())
    geometry, limits = data["geometry"], data["limits"]
    r, width = geometry["wheel_radius_m"], geometry["track_width_m"]
    rim = limits["wheel_rate_radps"] * r  # [K]
    speed = min(limits["speed_mps"], rim)
    reverse = min(limits.get("reverse_speed_mps", limits["speed_mps"]), rim)
    # [K]: the outer wheel is at (v + omega W / 2) / r, so omega <= 2 (rim - v) / W; [C]: omega <= a_side / v
    turn_at_top = min(limits["turn_rate_radps"], 2.0 * (rim - speed) / width)
    if "sideways_accel_mps2" in limits:
        turn_at_top = min(turn_at_top, limits["sideways_accel_mps2"] / speed)
    accel, jerk = limits["accel_mps2"], limits["jerk_mps3"]
    decel = limits.get("decel_mps2", accel)
    stop_decel, stop_jerk = limits["stop_decel_mps2"], limits.get("stop_jerk_mps3", 4.0 * jerk)
    accel_time = s_curve_time(speed, accel, jerk)
    stop_time = s_curve_time(speed, decel, jerk)
    fast_time = s_curve_time(speed, stop_decel, stop_jerk)
    return {
        "top_speed_mps": speed,
        "top_reverse_speed_mps": reverse,
        "top_turn_rate_radps": min(limits["turn_rate_radps"], 2.0 * rim / width),  # [K] spin: wR = -wL
        "turn_rate_at_top_speed_radps": turn_at_top,
        "min_turn_radius_at_top_speed_m": speed / turn_at_top if turn_at_top > 0 else None,  # [C]
        "accel_time_s": accel_time,
        "accel_distance_m": speed * accel_time / 2.0,
        "controlled_stop_time_s": stop_time,
        "controlled_stop_distance_m": speed * stop_time / 2.0,
        "fast_stop_time_s": fast_time,
        "fast_stop_distance_m": speed * fast_time / 2.0,
    }


def assert_figures(path: Path, figures: dict) -> None:
    for key, value in expected_figures(path).items():
        if value is None:
            assert figures[key] is None, key
        else:
            assert figures[key] == pytest.approx(value, rel=1e-9, abs=1e-12), key


@pytest.mark.parametrize("name", ["wren.toml", "bramble.toml", "wren-template.toml"])
def test_demo_envelopes_match_the_formulas(name: str, capsys: pytest.CaptureFixture[str]) -> None:
    path = PROFILES / name
    figures = check_json(path, capsys)
    assert figures["profile"] == str(path)
    assert figures["name"] == tomllib.loads(path.read_text())["robot"]["name"]
    assert_figures(path, figures)


BASE = """\
[robot]
name = "formula check"
[geometry]
wheel_radius_m = 0.1
track_width_m = 0.5
[limits]
turn_rate_radps = 3.0
accel_mps2 = 0.8
jerk_mps3 = 3.0
turn_accel_radps2 = 3.0
turn_jerk_radps3 = 10.0
wheel_rate_radps = 20.0
stop_decel_mps2 = 2.5
"""


@pytest.mark.parametrize(("extra", "what"), [
    ("speed_mps = 0.05\n", "short move: the acceleration never reaches its limit (dv < a^2 / j)"),
    ("speed_mps = 1.5\n", "no sideways limit: the outer wheel's rate limit bounds the turn at top speed"),
    ("speed_mps = 2.0\n", "top speed at the wheels' limit: no turn left, no finite radius"),
    ("speed_mps = 1.5\nsideways_accel_mps2 = 0.6\ndecel_mps2 = 1.1\nstop_jerk_mps3 = 12.0\n", "every option set"),
])
def test_branches_of_the_formulas(tmp_path: Path, capsys: pytest.CaptureFixture[str], extra: str, what: str) -> None:
    path = tmp_path / "robot.toml"
    path.write_text(BASE + extra)
    assert_figures(path, check_json(path, capsys))


def test_table_shows_the_same_figures(tmp_path: Path, capsys: pytest.CaptureFixture[str]) -> None:
    path = tmp_path / "robot.toml"
    path.write_text(BASE + "speed_mps = 2.0\n")
    figures = check_json(path, capsys)
    assert main(["profile", "check", str(path)]) == 0
    out = capsys.readouterr().out
    assert "formula check" in out and "profile OK" in out and "none: cannot turn at top speed" in out
    for key in ("top_speed_mps", "accel_time_s", "controlled_stop_distance_m", "fast_stop_time_s"):
        assert f"{figures[key]:.3f}" in out, key


def test_check_needs_a_profile_argument(capsys: pytest.CaptureFixture[str]) -> None:
    with pytest.raises(SystemExit) as raised:
        main(["profile", "check"])
    assert raised.value.code == 2
    assert "PROFILE" in capsys.readouterr().err
