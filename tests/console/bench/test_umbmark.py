"""UMBmark (Borenstein and Feng, 1996, "Measurement and correction of systematic odometry errors in mobile robots",
IEEE Transactions on Robotics and Automation 12(6)) checked two ways that do not use our own derivation:

1. exact plane geometry: a square driven with a known turn error alpha and a known per-leg curvature beta, traced
   turn by turn with exact arcs, gives return errors from which the formulas must give back alpha and beta;
2. the simulated robot with an injected wheel_radius_ratio and track_width_scale: the procedure must recover both and
   its corrected profile must cut the square's end-position error at least five-fold.
Differential-drive kinematics for the arc radius (Siegwart, Nourbakhsh and Scaramuzza, "Introduction to Autonomous
Mobile Robots", 2nd ed., 2011, section 3.2; from memory): wheels at rim speeds v_L, v_R on track b move on a circle of
radius (b/2) (v_R + v_L) / (v_R - v_L).
"""

from __future__ import annotations

import math
from pathlib import Path

import pytest

from console.bench.run import BenchRun
from console.bench.tomledit import edit_toml
from console.bench.umbmark import corrected_values, return_error, square_program, umbmark
from console.profile import Profile, load_profile

ROOT = Path(__file__).resolve().parents[3]
WREN = ROOT / "profiles" / "wren.toml"


def _square_end(side: float, alpha: float, beta: float, clockwise: bool) -> tuple[float, float]:
    """Exact end point of a square whose legs curve left by beta and whose turns fall short by alpha."""
    x = y = heading = 0.0
    turn = (-1.0 if clockwise else 1.0) * (math.pi / 2 - alpha)
    for _ in range(4):
        if beta == 0.0:
            x += side * math.cos(heading)
            y += side * math.sin(heading)
        else:
            radius = side / beta          # the leg is an arc of length `side` turning by beta
            x += radius * (math.sin(heading + beta) - math.sin(heading))
            y -= radius * (math.cos(heading + beta) - math.cos(heading))
            heading += beta
        heading += turn
    return x, y


@pytest.mark.parametrize(("alpha_deg", "beta_deg"), [(1.0, 0.0), (0.0, 0.8), (-0.7, 0.5), (1.5, -1.2)])
def test_formulas_recover_turn_and_curvature_errors_from_exact_geometry(alpha_deg: float, beta_deg: float) -> None:
    side, track = 4.0, 0.5
    alpha, beta = math.radians(alpha_deg), math.radians(beta_deg)
    result = umbmark(side, track, [_square_end(side, alpha, beta, True)], [_square_end(side, alpha, beta, False)])
    # the paper's equations are first order in the small angles: second-order residue below 3 % of the largest
    scale = max(abs(alpha), abs(beta))
    assert result.alpha_rad == pytest.approx(alpha, abs=0.03 * scale)
    assert result.beta_rad == pytest.approx(beta, abs=0.03 * scale)


def test_diameter_ratio_is_the_rim_speed_ratio_of_the_curved_leg() -> None:
    side, track, ratio = 3.0, 0.4, 1.01
    radius = 0.5 * track * (ratio + 1.0) / (ratio - 1.0)     # kinematics (see the module docstring)
    beta = side / radius
    result = umbmark(side, track, [_square_end(side, 0.0, beta, True)], [_square_end(side, 0.0, beta, False)])
    assert result.wheel_diameter_ratio == pytest.approx(ratio, abs=2e-4)
    # against the injected truth: diameters in the ratio R / L = ratio with their mean kept (Borenstein and Feng
    # 1996, section on the correction factors) are 2 / (ratio + 1) and 2 ratio / (ratio + 1) of the nominal
    assert result.c_left == pytest.approx(2.0 / (ratio + 1.0), abs=2e-4)
    assert result.c_right == pytest.approx(2.0 * ratio / (ratio + 1.0), abs=2e-4)


def test_turn_error_gives_the_track_width_factor() -> None:
    alpha = math.radians(2.0)
    result = umbmark(3.0, 0.4, [_square_end(3.0, alpha, 0.0, True)], [_square_end(3.0, alpha, 0.0, False)])
    # a robot turning through 90 - alpha when odometry says 90 has a track (90 / (90 - alpha)) times the nominal
    assert result.track_width_factor == pytest.approx(90.0 / (90.0 - 2.0), rel=1e-3)


def _sim_profile(tmp_path: Path, name: str, changes: dict[tuple[str, str], object]) -> Profile:
    path = tmp_path / name
    path.write_text(edit_toml(WREN.read_text(encoding="utf-8"), changes), encoding="utf-8")
    return load_profile(path)


def _errors(profile: Profile, tmp_path: Path, side: float) -> tuple[tuple[float, float], tuple[float, float]]:
    out = []
    for clockwise in (True, False):
        result = BenchRun(profile, square_program(profile, side, clockwise), out_dir=tmp_path).run_to_end()
        assert result.completed
        out.append(return_error(result.recording, profile))
    return out[0], out[1]


@pytest.mark.parametrize(("ratio", "scale"), [(1.005, 1.02), (0.996, 0.985)])
def test_sim_injected_errors_are_recovered_and_the_correction_cuts_the_error_fivefold(
        tmp_path: Path, ratio: float, scale: float) -> None:
    side = 3.0
    # no deadband: it eats part of every turn, which UMBmark (rightly, for the correction) reads as track width
    profile = _sim_profile(tmp_path, "robot.toml", {("sim", "wheel_radius_ratio"): ratio,
                                                    ("sim", "track_width_scale"): scale,
                                                    ("sim", "deadband_radps"): 0.0})
    cw, ccw = _errors(profile, tmp_path, side)
    result = umbmark(side, profile.geometry.track_width_m, [cw], [ccw])
    assert result.wheel_diameter_ratio == pytest.approx(ratio, abs=5e-4)
    # the sim keeps the LEFT radius nominal, so on-the-spot turns also scale by the mean radius (1 + ratio) / 2:
    # the effective track width UMBmark sees is scale * 2 / (1 + ratio)
    assert result.track_width_factor == pytest.approx(scale * 2.0 / (1.0 + ratio), rel=2e-3)
    changes = corrected_values(profile, result)
    fixed = _sim_profile(tmp_path, "fixed.toml", {("sim", "wheel_radius_ratio"): ratio,
                                                  ("sim", "deadband_radps"): 0.0, **changes})
    assert fixed.geometry.track_width_m * fixed.sim.track_width_scale == pytest.approx(
        profile.geometry.track_width_m * scale)              # the same physical robot
    cw_after, ccw_after = _errors(fixed, tmp_path, side)
    after = umbmark(side, fixed.geometry.track_width_m, [cw_after], [ccw_after])
    assert after.max_error_m * 5.0 <= result.max_error_m
