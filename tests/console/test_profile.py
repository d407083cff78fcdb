"""Profiles: the demo robots load completely; every kind of bad profile gives one line naming file, key, value,
what is allowed, and exit code 2 through the real `diffdeck` entry point, with nothing written."""

from __future__ import annotations

import dataclasses
import enum
import math
import re
import tomllib
from pathlib import Path

import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from console.cli import main
from console.profile import LinkConfig, ProfileError, SimConfig, load_profile

PROFILES = Path(__file__).resolve().parents[2] / "profiles"
DEMOS = ("wren.toml", "bramble.toml", "wren-template.toml")


def edit(text: str, section: str, key: str, literal: str | None) -> str:
    """Set `key = literal` in [section] of a TOML text (None deletes the key); adds the key if it is not there."""
    lines = text.splitlines()
    start = lines.index(f"[{section}]")
    end = next((i for i in range(start + 1, len(lines)) if lines[i].startswith("[")), len(lines))
    for i in range(start + 1, end):
        if re.match(rf"{re.escape(key)}\s*=", lines[i]):
            if literal is None:
                del lines[i]
            else:
                lines[i] = f"{key} = {literal}"
            return "\n".join(lines) + "\n"
    assert literal is not None, f"{key} not in [{section}]"
    lines.insert(start + 1, f"{key} = {literal}")
    return "\n".join(lines) + "\n"


def run_check(tmp_path: Path, text: str, capsys: pytest.CaptureFixture[str]) -> tuple[Path, int, str, str]:
    path = tmp_path / "robot.toml"
    path.write_text(text)
    code = main(["profile", "check", str(path)])
    out, err = capsys.readouterr()
    return path, code, out, err


@pytest.mark.parametrize("name", DEMOS)
def test_demo_profile_keeps_every_key_it_sets(name: str) -> None:
    """Nothing in a demo profile is dropped or altered: each key read back equals what the file says."""
    profile = load_profile(PROFILES / name)
    data = tomllib.loads((PROFILES / name).read_text())
    assert profile.data == data
    assert profile.name == data["robot"]["name"]
    objects = {"geometry": profile.geometry, "limits": profile.limits, "units": profile.units,
               "link": profile.link, "sim": profile.sim}
    for section, obj in objects.items():
        for key, value in data.get(section, {}).items():
            if key == "template":
                assert dataclasses.asdict(profile.link.template) == value
                continue
            read = getattr(obj, key)
            assert (read.value if isinstance(read, enum.Enum) else read) == value, f"{section}.{key}"


def test_demo_profiles_are_marked_invented() -> None:
    for name in DEMOS:
        head = (PROFILES / name).read_text().split("[robot]")[0]
        assert "INVENTED" in head, name


def test_template_demo_matches_the_example_telemetry_line_in_its_comment() -> None:
    text = (PROFILES / "wren-template.toml").read_text()
    example = re.search(r'robot -> console\s+"([^"]+)"', text).group(1)
    template = load_profile(PROFILES / "wren-template.toml").link.template
    match = re.fullmatch(template.telemetry_regex, example)
    assert match is not None and float(match["left"]) == pytest.approx(0.248)
    command = re.search(r'console -> robot\s+"(drv[^"]+)"', text).group(1)
    assert template.command_format.format(seq=42, left=0.25, right=-0.125) == command


MINIMAL = """\
[robot]
name = "minimal"
[geometry]
wheel_radius_m = 0.1
track_width_m = 0.5
[limits]
speed_mps = 1.5
turn_rate_radps = 2.0
accel_mps2 = 0.8
jerk_mps3 = 3.0
turn_accel_radps2 = 3.0
turn_jerk_radps3 = 10.0
wheel_rate_radps = 20.0
stop_decel_mps2 = 2.5
"""


def test_optional_keys_resolve_to_their_documented_defaults(tmp_path: Path) -> None:
    """Defaults from the profile format in issue 2 (reverse = speed, decel = accel, stop jerk = 4 x jerk) and the
    contract (sim rate saturation 1.2 x wheel rate; link and sim dataclass defaults)."""
    path = tmp_path / "minimal.toml"
    path.write_text(MINIMAL)
    profile = load_profile(path)
    limits = profile.limits
    assert limits.reverse_speed_mps == limits.speed_mps == 1.5
    assert limits.decel_mps2 == limits.accel_mps2 == 0.8
    assert limits.stop_jerk_mps3 == 4 * limits.jerk_mps3
    assert limits.sideways_accel_mps2 is None and limits.wheel_accel_radps2 is None
    assert profile.sim == dataclasses.replace(SimConfig(), max_wheel_rate_radps=1.2 * 20.0)
    assert profile.link == LinkConfig()
    with pytest.raises(dataclasses.FrozenInstanceError):
        profile.limits.speed_mps = 9.0  # type: ignore[misc]


@settings(max_examples=60, deadline=None)
@given(speed=st.floats(min_value=1e-3, max_value=4.0))
def test_speed_is_accepted_exactly_when_the_wheels_can_reach_it(tmp_path_factory: pytest.TempPathFactory,
                                                                speed: float) -> None:
    """v = omega_wheel * r for a wheel rolling without slip (common practice): 20 rad/s x 0.1 m = 2 m/s."""
    path = tmp_path_factory.mktemp("speed") / "robot.toml"
    path.write_text(edit(edit(MINIMAL, "limits", "speed_mps", repr(speed)), "limits", "reverse_speed_mps", "0.5"))
    if speed <= 20.0 * 0.1:
        assert load_profile(path).limits.speed_mps == speed
    else:
        with pytest.raises(ProfileError, match=r"limits\.speed_mps .*at most wheel_rate_radps x wheel_radius_m = 2 "):
            load_profile(path)


# (demo file, section, key, TOML literal or None to delete, dotted key in the message, value as shown, allowed)
BAD = [
    ("wren", "limits", "speed_mps", "true", "limits.speed_mps", "True", "a number from 0.001 to 100 (m/s)"),
    ("wren", "limits", "speed_mps", '"fast"', "limits.speed_mps", "'fast'", "a number from 0.001 to 100"),
    ("wren", "limits", "speed_mps", "nan", "limits.speed_mps", "nan", "a number from 0.001 to 100"),
    ("wren", "limits", "speed_mps", "inf", "limits.speed_mps", "inf", "a number from 0.001 to 100"),
    ("wren", "limits", "speed_mps", "0", "limits.speed_mps", "0", "a number from 0.001 to 100"),
    ("wren", "limits", "speed_mps", "-1.0", "limits.speed_mps", "-1.0", "a number from 0.001 to 100"),
    ("wren", "limits", "speed_mps", None, "limits.speed_mps", "(missing)", "required; a number from 0.001 to 100 (m/s)"),
    ("wren", "limits", "speed_mps", "2.0", "limits.speed_mps", "2.0",
     "at most wheel_rate_radps x wheel_radius_m = 1.24 m/s"),
    ("wren", "limits", "reverse_speed_mps", "1.3", "limits.reverse_speed_mps", "1.3", "at most wheel_rate_radps"),
    ("wren", "limits", "top_speed", "1.0", "limits.top_speed", "1.0", "unknown key ([limits] takes"),
    ("wren", "limits", "turn_rate_radps", "9.0", "limits.turn_rate_radps", "9.0",
     "at most 2 x wheel_rate_radps x wheel_radius_m / track_width_m = 7.294 rad/s"),
    ("wren", "limits", "stop_decel_mps2", "0.5", "limits.stop_decel_mps2", "0.5", "at least decel_mps2 = 1 m/s^2"),
    ("wren", "limits", "stop_jerk_mps3", "1.0", "limits.stop_jerk_mps3", "1.0", "at least jerk_mps3 = 2.5 m/s^3"),
    ("wren", "limits", "accel_mps2", "3.0", "limits.accel_mps2", "3.0",
     "at most wheel_accel_radps2 x wheel_radius_m = 2.17 m/s^2"),
    ("wren", "limits", "turn_accel_radps2", "13.0", "limits.turn_accel_radps2", "13.0",
     "at most 2 x wheel_accel_radps2 x wheel_radius_m / track_width_m = 12.76 rad/s^2"),
    ("wren", "limits", "sideways_accel_mps2", "-0.5", "limits.sideways_accel_mps2", "-0.5",
     "a number from 0.001 to 1000 (m/s^2; optional)"),
    ("wren", "geometry", "wheel_radius_m", "-0.062", "geometry.wheel_radius_m", "-0.062", "a number from 0.001 to 10"),
    ("wren", "geometry", "track_width_m", None, "geometry.track_width_m", "(missing)", "required"),
    ("wren", "robot", "name", '""', "robot.name", "''", "a non-empty string"),
    ("wren", "units", "unit", '"furlongs"', "units.unit", "'furlongs'",
     'one of "radps", "rpm", "ticks_per_s", "duty"'),
    ("wren", "units", "trim_left", "1.8", "units.trim_left", "1.8", "a number from 0.5 to 1.5"),
    ("wren", "units", "gear_ratio", "0", "units.gear_ratio", "0", "a number from 0.001 to 10000"),
    ("wren", "units", "invert_left", "1", "units.invert_left", "1", "true or false"),
    ("wren", "units", "swap_encoders", '"no"', "units.swap_encoders", "'no'", "true or false"),
    ("bramble", "units", "ticks_per_rev", None, "units.ticks_per_rev", "(missing)", "required"),
    ("wren-template", "units", "full_duty_radps", None, "units.full_duty_radps", "(missing)", "required"),
    ("wren-template", "units", "full_duty_radps", "10.0", "units.full_duty_radps", "10.0",
     "at least limits.wheel_rate_radps = 20 rad/s, or duty would pass 1.0"),
    ("wren", "link", "rate_hz", "5", "link.rate_hz", "5", "a number from 10 to 1000 (Hz)"),
    ("wren", "link", "rate_hz", "2000.0", "link.rate_hz", "2000.0", "a number from 10 to 1000 (Hz)"),
    ("wren", "link", "protocol", '"modbus"', "link.protocol", "'modbus'", 'one of "diffdeck", "template"'),
    ("wren", "link", "baud", "115200.5", "link.baud", "115200.5", "a whole number from 50 to 12000000"),
    ("wren", "link", "baud", "true", "link.baud", "True", "a whole number from 50 to 12000000"),
    ("wren", "link", "url", "5", "link.url", "5", "a non-empty string"),
    ("wren", "link", "watchdog_s", "0.01", "link.watchdog_s", "0.01", "at least two command periods"),
    ("wren", "link", "telemetry_timeout_s", "0.02", "link.telemetry_timeout_s", "0.02",
     "at least two telemetry periods"),
    ("wren", "link", "protocol", '"template"', "link.template", "(missing)", "required; a [link.template] section"),
    ("wren", "sim", "seed", "-1", "sim.seed", "-1", "a whole number from 0 to 9223372036854775807"),
    ("wren", "sim", "encoder_ticks_per_rev", "0", "sim.encoder_ticks_per_rev", "0", "a whole number from 1 to 10000000"),
    ("wren", "sim", "wheel_radius_ratio", "2.0", "sim.wheel_radius_ratio", "2.0", "a number from 0.5 to 1.5"),
    ("wren", "sim", "noise_radps", "-0.1", "sim.noise_radps", "-0.1", "a number from 0 to 1000 (rad/s"),
    ("wren", "sim", "dead_left", '"yes"', "sim.dead_left", "'yes'", "true or false"),
    ("wren", "sim", "mass_kg", "9.0", "sim.mass_kg", "9.0", "unknown key ("),
    ("wren-template", "link.template", "command_format", '"drv {seq} {left} {speed}"',
     "link.template.command_format", "'drv {seq} {left} {speed}'", "unknown field {speed}; allowed fields:"),
    ("wren-template", "link.template", "command_format", '"drv {0} {left} {right}"',
     "link.template.command_format", "'drv {0} {left} {right}'", "unknown field {0}"),
    ("wren-template", "link.template", "command_format", '"drv {seq} {left}"', "link.template.command_format",
     "'drv {seq} {left}'", "must contain {right}"),
    ("wren-template", "link.template", "command_format", '"drv {left:d} {right}"', "link.template.command_format",
     "'drv {left:d} {right}'", "{left:d} is not a plain number field"),
    ("wren-template", "link.template", "command_format", '"drv {left.__class__} {right}"',
     "link.template.command_format", "'drv {left.__class__} {right}'", "unknown field {left.__class__}"),
    ("wren-template", "link.template", "command_format", '"drv {left!r} {right}"',
     "link.template.command_format", "'drv {left!r} {right}'", "{left!r:} is not a plain number field"),
    ("wren-template", "link.template", "command_format", '"drv {left:{seq}} {right}"',
     "link.template.command_format", "'drv {left:{seq}} {right}'", "is not a plain number field"),
    ("wren-template", "link.template", "command_format", '"drv {left:300.4f} {right}"',
     "link.template.command_format", "'drv {left:300.4f} {right}'", "renders wider than the robot's line (255 bytes)"),
    ("wren-template", "link.template", "command_format", '"drv {left:500000000} {right}"',
     "link.template.command_format", "'drv {left:500000000} {right}'", "renders wider than the robot's line"),
    ("wren-template", "link.template", "command_format", '"drv {left:120.3f} {right:120.3f} {seq:20d}"',
     "link.template.command_format", "'drv {left:120.3f} {right:120.3f} {seq:20d}'",
     "renders 266 bytes with left = right = -0.909091 (the fastest command), more than the robot's line of 255 bytes"),
    ("wren-template", "link.template", "command_format", '"drv {left {right}"', "link.template.command_format",
     "'drv {left {right}'", "a Python format string"),
    ("wren-template", "link.template", "command_format", '"drv {left}\\n{right}"', "link.template.command_format",
     "'drv {left}\\n{right}'", "one line without line breaks"),
    ("wren-template", "link.template", "stop_format", '"halt {left}"', "link.template.stop_format",
     "'halt {left}'", "unknown field {left}; allowed fields: {seq}"),
    ("wren-template", "link.template", "telemetry_regex", "'fb (?P<left>\\d+'", "link.template.telemetry_regex",
     "'fb (?P<left>\\\\d+'", "a Python regular expression (missing ), unterminated subpattern"),
    ("wren-template", "link.template", "telemetry_regex", "'(?P<left>\\S+) (?P<right>\\S+) (?P<speed>\\S+)'",
     "link.template.telemetry_regex", "'(?P<left>\\\\S+) (?P<right>\\\\S+) (?P<speed>\\\\S+)'",
     "unknown group (?P<speed>)"),
    ("wren-template", "link.template", "telemetry_regex", "'fb (?P<left>\\S+)'", "link.template.telemetry_regex",
     "'fb (?P<left>\\\\S+)'", "needs the named group (?P<right>...)"),
    ("wren-template", "link.template", "stop", '"halt"', "link.template.stop", "'halt'", "unknown key"),
]


@pytest.mark.parametrize(("demo", "section", "key", "literal", "dotted", "shown", "allowed"), BAD,
                         ids=[f"{case[4]}={case[3]}" for case in BAD])
def test_bad_profile_gives_one_line_and_exit_2(tmp_path: Path, capsys: pytest.CaptureFixture[str], demo: str,
                                               section: str, key: str, literal: str | None, dotted: str,
                                               shown: str, allowed: str) -> None:
    text = edit((PROFILES / f"{demo}.toml").read_text(), section, key, literal)
    path, code, out, err = run_check(tmp_path, text, capsys)
    assert code == 2
    assert out == ""
    assert err.count("\n") == 1, err
    assert err.startswith(f"diffdeck: {path}: {dotted} = {shown}: "), err
    assert allowed in err, err
    assert sorted(tmp_path.iterdir()) == [path]


def test_template_section_without_template_protocol_is_an_error(tmp_path: Path,
                                                                capsys: pytest.CaptureFixture[str]) -> None:
    text = edit((PROFILES / "wren-template.toml").read_text(), "link", "protocol", '"diffdeck"')
    path, code, out, err = run_check(tmp_path, text, capsys)
    assert (code, out, err.count("\n")) == (2, "", 1)
    assert err.startswith(f"diffdeck: {path}: link.template = {{")
    assert 'only with protocol = "template"' in err


def test_unknown_section(tmp_path: Path, capsys: pytest.CaptureFixture[str]) -> None:
    path, code, out, err = run_check(tmp_path, MINIMAL + "[motors]\nleft = 1\n", capsys)
    assert (code, out) == (2, "")
    assert err == f"diffdeck: {path}: [motors] = {{a table}}: unknown section (a profile has [robot], [geometry], " \
                  "[limits], [units], [link], [sim], [body], [input])\n"


def test_misspelt_key_and_section_are_named_with_the_closest_known_one(tmp_path: Path,
                                                                      capsys: pytest.CaptureFixture[str]) -> None:
    text = edit((PROFILES / "wren.toml").read_text(), "limits", "speed_mps", None) + "\n"
    text = text.replace("[limits]\n", "[limits]\nsped_mps = 1.0\n")
    path, code, out, err = run_check(tmp_path, text, capsys)
    assert (code, out) == (2, "")
    assert err == f"diffdeck: {path}: limits.sped_mps = 1.0: unknown key (did you mean speed_mps?)\n"
    text = (PROFILES / "wren.toml").read_text().replace("[limits]", "[limit]")
    path, code, out, err = run_check(tmp_path, text, capsys)
    assert (code, out) == (2, "")
    assert err == f"diffdeck: {path}: [limit] = {{a table}}: unknown section (did you mean [limits]?)\n"


def test_section_that_is_not_a_table(tmp_path: Path, capsys: pytest.CaptureFixture[str]) -> None:
    robot, rest = MINIMAL.split("[geometry]\n")
    text = "geometry = 3\n" + robot + "[limits]" + rest.split("[limits]")[1]  # a key instead of the [geometry] table
    path, code, out, err = run_check(tmp_path, text, capsys)
    assert (code, out) == (2, "")
    assert err == f"diffdeck: {path}: geometry = 3: a table: write it as a [geometry] section\n"


def test_missing_section(tmp_path: Path, capsys: pytest.CaptureFixture[str]) -> None:
    text = MINIMAL.split("[limits]")[0]
    path, code, out, err = run_check(tmp_path, text, capsys)
    assert (code, out) == (2, "")
    assert err == f"diffdeck: {path}: limits = (missing): required section [limits]\n"


def test_toml_syntax_error_names_file_and_line(tmp_path: Path, capsys: pytest.CaptureFixture[str]) -> None:
    text = MINIMAL.replace("jerk_mps3 = 3.0", "jerk_mps3 3.0")
    line = text.splitlines().index("jerk_mps3 3.0") + 1
    path, code, out, err = run_check(tmp_path, text, capsys)
    assert (code, out) == (2, "")
    assert err.startswith(f"diffdeck: {path}, line {line}: TOML syntax = 'jerk_mps3 3.0': Expected '='"), err
    assert err.count("\n") == 1


def test_missing_file_and_non_utf8(tmp_path: Path, capsys: pytest.CaptureFixture[str]) -> None:
    missing = tmp_path / "nope.toml"
    assert main(["profile", "check", str(missing)]) == 2
    assert capsys.readouterr().err == f"diffdeck: {missing}: file = {str(missing)!r}: no such file; " \
                                      "give the path of a TOML profile\n"
    binary = tmp_path / "binary.toml"
    binary.write_bytes(b"[robot]\nname = \"\xff\"\n")
    assert main(["profile", "check", str(binary)]) == 2
    assert "not UTF-8 text" in capsys.readouterr().err


def test_profile_envelope_uses_its_geometry_and_limits() -> None:
    profile = load_profile(PROFILES / "bramble.toml")
    assert profile.envelope.geometry is profile.geometry and profile.envelope.limits is profile.limits
    assert math.isclose(profile.envelope.top_speed_mps, profile.limits.speed_mps)


# The wire carries wheel rates as +-2000000.000 firmware units (PROTOCOL.md section 10). A wheel rate w rad/s is
# w / (2 pi) revolutions per second of the wheel (one revolution is 2 pi rad: SI Brochure, 9th ed., 2019, table 4),
# gear_ratio times that at the motor, and ticks_per_rev ticks per motor revolution.
@pytest.mark.parametrize(("unit", "gear", "ticks", "fits"), [
    ("ticks_per_s", 50.0, 100000.0, False),      # the case from issue 9: passed profile check before
    ("ticks_per_s", 30.0, 4096.0, True),
    ("rpm", 10000.0, 48.0, False),               # 20 rad/s x 10000 = 1.9 million rpm, x 1.5 trim: past it
    ("rpm", 6000.0, 48.0, True),
])
def test_the_fastest_wheel_command_must_fit_the_wire(tmp_path: Path, capsys: pytest.CaptureFixture[str], unit: str,
                                                    gear: float, ticks: float, fits: bool) -> None:
    text = (PROFILES / "wren.toml").read_text()
    wheel_rate = load_profile(PROFILES / "wren.toml").limits.wheel_rate_radps
    for key, literal in (("unit", f'"{unit}"'), ("gear_ratio", repr(gear)), ("ticks_per_rev", repr(ticks)),
                         ("trim_left", "1.5")):
        text = edit(text, "units", key, literal)
    revs_per_s = wheel_rate / (2.0 * math.pi) * gear * 1.5
    top = revs_per_s * ticks if unit == "ticks_per_s" else revs_per_s * 60.0
    assert (top <= 2_000_000.0) == fits, "the case table itself is wrong"
    path, code, out, err = run_check(tmp_path, text, capsys)
    if fits:
        assert (code, err) == (0, "")
    else:
        key = "ticks_per_rev" if unit == "ticks_per_s" else "gear_ratio"
        assert code == 2 and err.count("\n") == 1
        assert err.startswith(f"diffdeck: {path}: units.{key} = {ticks if key == 'ticks_per_rev' else gear}: ")
        assert f"the fastest wheel command is {top:.4g} {unit}: beyond the wire's +-2000000.000" in err


@pytest.mark.parametrize(("key", "literal"), [("accel_mps2", "1e-300"), ("decel_mps2", "1e-300"),
                                              ("jerk_mps3", "1e-300"), ("speed_mps", "1e-300"),
                                              ("wheel_rate_radps", "1e300"), ("turn_jerk_radps3", "1e300")])
def test_numbers_that_would_overflow_a_derived_figure_are_refused(tmp_path: Path, capsys: pytest.CaptureFixture[str],
                                                                  key: str, literal: str) -> None:
    path, code, out, err = run_check(tmp_path, edit((PROFILES / "wren.toml").read_text(), "limits", key, literal),
                                     capsys)
    assert (code, out, err.count("\n")) == (2, "", 1)
    assert err.startswith(f"diffdeck: {path}: limits.{key} = {float(literal)!r}: a number from "), err


def test_a_profile_nested_too_deeply_is_one_line(tmp_path: Path, capsys: pytest.CaptureFixture[str]) -> None:
    text = MINIMAL + "x = " + "[" * 2000 + "]" * 2000
    path, code, out, err = run_check(tmp_path, text, capsys)
    assert (code, out) == (2, "")
    assert err == f"diffdeck: {path}: TOML syntax = '': arrays or tables nested too deeply for a profile\n"


# Nested quantifiers over the same characters backtrack exponentially on a line that fails at its end (Friedl,
# Mastering Regular Expressions, 3rd ed., O'Reilly 2006, ch. 6, "A Global View of Backtracking" / runaway regex).
@pytest.mark.parametrize("regex", [r"^(?P<left>(\d+)+) (?P<right>\d+)$", r"(?P<left>(a|a)*)x(?P<right>\d)"])
def test_a_telemetry_regex_that_backtracks_for_ever_is_refused(tmp_path: Path, capsys: pytest.CaptureFixture[str],
                                                               regex: str) -> None:
    text = edit((PROFILES / "wren-template.toml").read_text(), "link.template", "telemetry_regex", f"'{regex}'")
    path, code, out, err = run_check(tmp_path, text, capsys)
    assert (code, out, err.count("\n")) == (2, "", 1)
    assert err.startswith(f"diffdeck: {path}: link.template.telemetry_regex = {regex!r}: takes more than 0.05 s on "
                          "a line of 254 characters repeating "), err
