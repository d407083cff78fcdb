"""`profile check` with a [body]: static tip-over and traction limits, and a one-line warning (exit 0) for each
limit of the profile beyond them. The figures are worked out by hand here.

Sources: moments about the support edge, a_tip = g d / h (rigid-body statics, e.g. Meriam and Kraige, Engineering
Mechanics: Statics; from memory); sideways this is the static stability factor W / (2 h) of rollover ratings (NHTSA,
Federal Register 65 FR 34998, 2000; from memory); traction mu g x the share of the weight on the drive wheels
(Coulomb friction, common practice). g = 9.80665 m/s^2 (CGPM 1901).
"""

from __future__ import annotations

import json
from pathlib import Path

import pytest

from console.cli import main

G = 9.80665
BASE = """\
[robot]
name = "box on two wheels"
[geometry]
wheel_radius_m = 0.1
track_width_m = 0.5
[limits]
speed_mps = 1.0
turn_rate_radps = 2.0
accel_mps2 = 0.5
jerk_mps3 = 2.0
turn_accel_radps2 = 2.0
turn_jerk_radps3 = 8.0
wheel_rate_radps = 20.0
stop_decel_mps2 = 1.0
"""


def check(tmp_path: Path, capsys: pytest.CaptureFixture[str], text: str, *options: str) -> tuple[int, str, str]:
    path = tmp_path / "robot.toml"
    path.write_text(text)
    code = main(["profile", "check", str(path), *options])
    captured = capsys.readouterr()
    return code, captured.out, captured.err


def test_a_box_as_tall_as_half_its_track(tmp_path: Path, capsys: pytest.CaptureFixture[str]) -> None:
    # h = W / 2 = 0.25 m: sideways tip at 1 g. Casters 0.2 m ahead and behind, centre of mass over the axle:
    # over either end at g x 0.2 / 0.25 = 0.8 g. mu 0.5 with 70 % on the drive wheels: 0.35 g
    body = ("[body]\ncog_height_m = 0.25\nsupport_ahead_m = 0.2\nsupport_behind_m = 0.2\ndrive_load_share = 0.7\n"
            "tyre_friction = 0.5\n")
    code, out, _ = check(tmp_path, capsys, BASE + "sideways_accel_mps2 = 3.0\n" + body, "--json")
    figures = json.loads(out)
    assert code == 0
    assert figures["sideways_tip_mps2"] == pytest.approx(G)
    assert figures["forward_tip_mps2"] == pytest.approx(0.8 * G)
    assert figures["backward_tip_mps2"] == pytest.approx(0.8 * G)
    assert figures["traction_mps2"] == pytest.approx(0.35 * G)
    assert figures["body_warnings"] == []       # 3.0 < 3.43 (traction) < 7.8 < 9.8: all inside


def test_each_limit_beyond_the_body_is_one_warning_line_with_its_margin(tmp_path: Path,
                                                                        capsys: pytest.CaptureFixture[str]) -> None:
    # a tall cart, h = 0.6 m on a 0.5 m track: sideways tip at g x 0.25 / 0.6 = 4.09 m/s^2; a front caster 0.1 m
    # ahead, the centre of mass 0.05 m ahead: over the front at g x 0.05 / 0.6 = 0.817, over the back (no rear
    # support) at g x 0.05 / 0.6 = 0.817 m/s^2; traction 0.8 g = 7.85
    body = "[body]\ncog_height_m = 0.6\ncog_ahead_m = 0.05\nsupport_ahead_m = 0.1\ntyre_friction = 0.8\n"
    code, out, err = check(tmp_path, capsys, BASE + "sideways_accel_mps2 = 5.0\n" + body)
    warnings = [line for line in out.splitlines() if line.startswith("warning: ")]
    assert code == 0 and err == ""
    tip = G * 0.05 / 0.6
    assert warnings == [
        f"warning: limits.stop_decel_mps2 = 1 m/s^2 exceeds the static tip-over (front or back) limit {tip:.3g} m/s^2:"
        f" {100 * (1.0 / tip - 1):.0f} % over",
        f"warning: limits.sideways_accel_mps2 = 5 m/s^2 exceeds the static sideways tip-over limit "
        f"{G * 0.25 / 0.6:.3g} m/s^2: {100 * (5.0 / (G * 0.25 / 0.6) - 1):.0f} % over",
    ]
    assert "static, on level ground" in out and "local codes and licensed practice" in out


def test_no_sideways_limit_is_judged_by_what_the_envelope_allows(tmp_path: Path,
                                                                 capsys: pytest.CaptureFixture[str]) -> None:
    # without sideways_accel_mps2 the envelope still bounds v x omega: rim speed 20 x 0.1 = 2 m/s, so on the outer
    # wheel's line v + omega 0.25 = 2 the product 4 v (2 - v) peaks at v = 1 (the speed limit too): 1 x 4 = 4, but
    # omega <= 2 rad/s caps it: v = 1, omega = 2 gives 2 m/s^2. A body tipping at g x 0.25 / 1.5 = 1.63 warns
    body = "[body]\ncog_height_m = 1.5\nsupport_ahead_m = 0.3\nsupport_behind_m = 0.3\ntyre_friction = 0.9\n"
    code, out, _ = check(tmp_path, capsys, BASE + body, "--json")
    [warning] = json.loads(out)["body_warnings"]
    assert code == 0
    assert warning.startswith("limits.sideways_accel_mps2 = not set (the envelope allows 2 m/s^2) exceeds the "
                              f"static sideways tip-over limit {G * 0.25 / 1.5:.3g} m/s^2")


@pytest.mark.parametrize(("body", "key", "allowed"), [
    ("cog_height_m = 0.5\ncog_ahead_m = 0.3\nsupport_ahead_m = 0.2\ntyre_friction = 0.5\n", "body.cog_ahead_m",
     "tips over at rest"),
    ("cog_height_m = 0.5\ntyre_friction = 0\n", "body.tyre_friction", "from 0.01 to 3"),
    ("cog_height_m = 0.5\ntyre_frictoin = 0.5\n", "body.tyre_frictoin", "did you mean tyre_friction?"),
    ("tyre_friction = 0.5\n", "body.cog_height_m", "required"),
    ("cog_height_m = 0.5\ntyre_friction = 0.5\ndrive_load_share = 1.5\n", "body.drive_load_share", "to 1"),
])
def test_a_bad_body_is_one_line_and_exit_2(tmp_path: Path, capsys: pytest.CaptureFixture[str], body: str, key: str,
                                          allowed: str) -> None:
    code, out, err = check(tmp_path, capsys, BASE + "[body]\n" + body)
    assert code == 2 and out == ""
    assert err.count("\n") == 1 and key in err and allowed in err


def test_without_a_body_there_are_no_body_figures(tmp_path: Path, capsys: pytest.CaptureFixture[str]) -> None:
    code, out, _ = check(tmp_path, capsys, BASE, "--json")
    assert code == 0 and "traction_mps2" not in json.loads(out)
