"""Test programs: the built-ins and the demo programs bind to the demo robots; bad programs are one line, exit 2."""

from __future__ import annotations

import io
import math
from pathlib import Path

import numpy as np
import pytest

from console.bench.program import BUILTINS, BoundProgram, ProgramError, builtin, load_program, resolve_program
from console.cli import main
from console.profile import load_profile

ROOT = Path(__file__).resolve().parents[3]
PROFILES = sorted((ROOT / "profiles").glob("*.toml"))
PROGRAMS = sorted((ROOT / "profiles" / "programs").glob("*.toml"))


@pytest.mark.parametrize("profile", PROFILES, ids=lambda p: p.stem)
@pytest.mark.parametrize("name", list(BUILTINS) + [str(p) for p in PROGRAMS])
def test_builtins_and_demo_programs_bind_to_every_demo_profile(profile: Path, name: str) -> None:
    bound = BoundProgram(resolve_program(name), load_profile(profile).envelope)
    samples = bound.sample(0.01)
    assert samples.t_s.size == math.ceil(bound.duration_s / 0.01 - 1e-9)
    assert np.all(np.isfinite(samples.first)) and np.all(np.isfinite(samples.second))


def test_percentages_are_shares_of_the_envelope_and_steps_fall_on_their_lead() -> None:
    profile = load_profile(ROOT / "profiles" / "wren.toml")
    env = profile.envelope
    samples = BoundProgram(builtin("step"), env).sample(0.01)
    # "speed up": 0 until lead_s = 0.5 s, then 50 % of the top speed
    assert samples.first[49] == 0.0 and samples.first[50] == pytest.approx(0.5 * env.top_speed_mps)
    spin = BoundProgram(builtin("spin"), env).sample(0.01)
    assert spin.second.min() == pytest.approx(-0.5 * env.top_turn_rate_radps)


def test_single_wheel_segments_keep_the_other_wheel_still() -> None:
    profile = load_profile(ROOT / "profiles" / "wren.toml")
    samples = BoundProgram(builtin("polarity"), profile.envelope).sample(0.01)
    left, right = profile.geometry.to_wheels(samples.first, samples.second)
    on_left = samples.segment <= 4
    assert np.allclose(right[on_left], 0.0) and np.allclose(left[~on_left], 0.0)
    assert np.max(np.abs(left)) == pytest.approx(0.15 * profile.limits.wheel_rate_radps)


def test_chirp_sweeps_between_its_frequencies() -> None:
    """A linear sweep has phase 2 pi (f0 t + k t^2 / 2), k = (f1 - f0) / T (common practice): the sine wave crosses
    its offset where f0 t + k t^2 / 2 = n / 2."""
    profile = load_profile(ROOT / "profiles" / "wren.toml")
    bound = BoundProgram(builtin("chirp"), profile.envelope)
    samples = bound.sample(0.001)
    sweep = samples.segment == 0
    wave = samples.first[sweep] - bound.segments[0].start
    crossings = samples.t_s[np.flatnonzero(np.diff(np.signbit(wave))) + 1]
    seg = bound.segments[0].segment
    k = (seg.f1_hz - seg.f0_hz) / seg.duration_s
    n = np.arange(1, crossings.size + 1)
    expected = (-seg.f0_hz + np.sqrt(seg.f0_hz**2 + k * n)) / k
    np.testing.assert_allclose(crossings, expected, atol=0.002)
    assert 1 / (2 * np.diff(crossings[-3:]).mean()) == pytest.approx(seg.f1_hz, rel=0.03)


def test_identify_steps_each_wheel_both_ways_within_the_limits_around_the_shaper() -> None:
    """The open-loop identification: every level within the wheel-rate limit (so within duty 1 on a duty profile,
    whose full_duty_radps is at least that limit), one wheel at a time, each way at three amplitudes and a slow ramp
    from rest, wheels-up caution in its description, bounded in time."""
    profile = load_profile(ROOT / "profiles" / "wren-open.toml")
    program = builtin("identify")
    assert program.bypasses and all(seg.bypass for seg in program.segments)
    assert "WHEELS OFF THE GROUND" in program.description
    assert program.duration_s <= 90.0
    samples = BoundProgram(program, profile.envelope).sample(0.01)
    assert samples.wheels.all()
    left, right = samples.first, samples.second                  # wheel requests: rad/s per wheel
    top = profile.limits.wheel_rate_radps
    duty = np.concatenate([left, right]) / profile.units.full_duty_radps
    assert np.max(np.abs(np.concatenate([left, right]))) <= top * (1 + 1e-9) and np.max(np.abs(duty)) <= 1.0
    assert not np.any((np.abs(left) > 1e-9) & (np.abs(right) > 1e-9))          # one wheel at a time
    for wheel, rates in (("left", left), ("right", right)):
        for sign in (1.0, -1.0):
            levels = {round(float(x) / top, 6) for x in rates if x * sign > 1e-9}
            steps = [seg for seg in program.segments if seg.axis.value == wheel and seg.kind.value == "step"
                     and sign * seg.end.value > 0]
            assert len(steps) >= 3 and len({seg.end.value for seg in steps}) >= 3
            assert max(abs(level) for level in levels) == pytest.approx(0.75)
        ramps = [seg for seg in program.segments if seg.axis.value == wheel and seg.kind.value == "ramp"]
        assert sorted(seg.end.value for seg in ramps) == [-20.0, 20.0] and all(seg.start.value == 0 for seg in ramps)


BAD = [
    ("[[segment]]\nkind = 'jump'\nduration_s = 1\n", "segment[0].kind", 'one of "hold", "step"'),
    ("[[segment]]\nkind = 'step'\nto = 0.2\n", "segment[0].duration_s", "a number > 0"),
    ("[[segment]]\nkind = 'step'\nto = '120%'\nduration_s = 1\n", "segment[0].to", "at most 100 %"),
    ("[[segment]]\nkind = 'step'\nto = 'fast'\nduration_s = 1\n", "segment[0].to", "percentage"),
    ("[[segment]]\nkind = 'hold'\nvalue = 0.1\nduration_s = 1\ncolour = 'red'\n", "segment[0].colour", "known key"),
    ("[[segment]]\nkind = 'step'\nto = 0.2\nduration_s = 1\nlead_s = 2\n", "segment[0].lead_s", "from 0 to 1"),
    ("[[segment]]\nkind = 'step'\nto = 0.2\nduration_s = 1\nwith = { left = 1 }\n", "segment[0].with.left", "takes turn"),
    ("[[segment]]\nkind = 'chirp'\namplitude = 0.1\nf0_hz = 1\nduration_s = 5\n", "segment[0].f1_hz", "a number"),
    ("[program]\nname = 'x'\n", "segment", "one or more [[segment]]"),
    ("[[segment]\n", "syntax", "valid TOML"),
    ("[[segment]]\nkind = 'step'\nto = 9.0\nduration_s = 1\n", "segment[0].to", "between -0.4 and 1 m/s"),
    ("[[segment]]\nkind = 'step'\naxis = 'left'\nto = 50.0\nduration_s = 1\n", "segment[0].to", "<= 20 rad/s"),
    ("[[segment]]\nkind = 'hold'\nvalue = 0.9\nwith = { turn = 2.0 }\nduration_s = 1\n", "segment[0].with",
     "|turn rate| <="),
]


@pytest.mark.parametrize(("text", "key", "allowed"), BAD)
def test_bad_programs_are_one_line_naming_file_key_and_what_is_allowed(
        tmp_path: Path, capsys: pytest.CaptureFixture[str], text: str, key: str, allowed: str) -> None:
    path = tmp_path / "bad.toml"
    path.write_text(text)
    code = main(["bench", str(ROOT / "profiles" / "wren.toml"), str(path), "--out", str(tmp_path / "rec")])
    err = capsys.readouterr().err
    assert code == 2
    assert err.count("\n") == 1 and str(path) in err and key in err and allowed in err, err
    assert not (tmp_path / "rec").exists() or not any((tmp_path / "rec").iterdir())   # nothing half-written


def test_unknown_builtin_lists_the_builtins() -> None:
    with pytest.raises(ProgramError, match="step, ramp, chirp"):
        resolve_program("wiggle")
    with pytest.raises(ProgramError, match="no such file"):
        load_program("/nonexistent/program.toml")


def test_bench_cli_on_the_sim_records_and_reports(tmp_path: Path, capsys: pytest.CaptureFixture[str]) -> None:
    rec_dir = tmp_path / "rec"
    assert main(["bench", str(ROOT / "profiles" / "wren.toml"), "spin", "--out", str(rec_dir)]) == 0
    csv = next(rec_dir.glob("*.csv"))
    assert (rec_dir / (csv.name + ".bench.json")).exists() and (rec_dir / (csv.name + ".json")).exists()
    capsys.readouterr()
    assert main(["report", str(csv), "-o", str(tmp_path / "rep"), "--json"]) == 0
    assert '"segments"' in capsys.readouterr().out
    assert (tmp_path / "rep" / "summary.md").exists()


def test_hardware_run_needs_the_typed_confirmation(tmp_path: Path, monkeypatch: pytest.MonkeyPatch,
                                                   capsys: pytest.CaptureFixture[str]) -> None:
    monkeypatch.setattr("sys.stdin", io.StringIO("yes\n"))
    code = main(["bench", str(ROOT / "profiles" / "wren.toml"), "step", "--link", "loop://",
                 "--out", str(tmp_path)])
    err = capsys.readouterr().err
    assert code == 2 and "confirmation" in err.splitlines()[-1] and "wheels up" in err.splitlines()[-1]
    assert list(tmp_path.iterdir()) == []          # nothing ran, nothing left behind
