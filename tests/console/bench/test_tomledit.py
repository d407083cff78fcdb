"""Corrected profile copies: values changed in place with comments kept, missing keys and sections added, and the
result read back by tomllib (the standard library's TOML 1.0 parser) with exactly the intended values."""

from __future__ import annotations

import tomllib

import pytest

from console.bench.tomledit import edit_toml

TEXT = """# a robot
[geometry]
wheel_radius_m = 0.05   # measured with calipers
track_width_m = 0.30

[units]
unit = "rpm"

[link.template]
command_format = "W {left} {right}"
"""


def test_values_change_in_place_and_comments_stay() -> None:
    out = edit_toml(TEXT, {("geometry", "track_width_m"): 0.3123, ("geometry", "wheel_radius_m"): 0.051})
    assert "wheel_radius_m = 0.051   # measured with calipers" in out
    assert out.startswith("# a robot\n")
    assert tomllib.loads(out)["geometry"] == {"wheel_radius_m": 0.051, "track_width_m": 0.3123}


def test_missing_keys_and_sections_are_added() -> None:
    out = edit_toml(TEXT, {("units", "trim_left"): 1.01, ("sim", "track_width_scale"): 0.99,
                           ("link.template", "stop_format"): "S", ("units", "invert_left"): True})
    data = tomllib.loads(out)
    assert data["units"] == {"unit": "rpm", "trim_left": 1.01, "invert_left": True}
    assert data["sim"] == {"track_width_scale": 0.99}
    assert data["link"]["template"]["stop_format"] == "S"


def test_a_key_of_the_same_name_in_another_section_is_left_alone() -> None:
    text = "[a]\nx = 1\n[b]\nx = 2\n"
    assert tomllib.loads(edit_toml(text, {("b", "x"): 3})) == {"a": {"x": 1}, "b": {"x": 3}}


def test_values_toml_cannot_hold_are_refused() -> None:
    with pytest.raises(ValueError):
        edit_toml(TEXT, {("geometry", "track_width_m"): float("nan")})
