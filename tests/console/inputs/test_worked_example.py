"""The worked `[input]` example of docs/console.md (the invented Pipit P2 pad) through `diffdeck input map`: the
numbers it explains are worked out here from issue 12's definition of the mapping (x = (value - (min + max) / 2) /
((max - min) / 2), deadzone rescaling, y = (1 - e) x + e x^3, times the setting and the top rate), and the output the
page shows is what the command prints, so the page cannot drift from the program."""

from __future__ import annotations

import re
from pathlib import Path

import pytest

from console.cli import main
from console.profile import load_profile

ROOT = Path(__file__).resolve().parents[3]
DOC = (ROOT / "docs" / "console.md").read_text(encoding="utf-8")
SECTION = DOC[DOC.index("### A worked `[input]` example"):]


def block(after: str) -> str:
    start = SECTION.index(after)
    return SECTION[start:SECTION.index("```", start)]


def shaped(value: float, low: float, high: float, deadzone: float, expo: float) -> float:
    x = -(value - (low + high) / 2.0) / ((high - low) / 2.0)            # inverted axis
    x = (abs(x) - deadzone) / (1.0 - deadzone) * (1.0 if x > 0 else -1.0)
    return (1.0 - expo) * x + expo * x ** 3


def test_the_worked_example_maps_as_the_page_explains(tmp_path: Path, capsys: pytest.CaptureFixture[str]) -> None:
    toml = re.search(r"```toml\n(.*?)```", SECTION, re.S)
    assert toml is not None
    profile = tmp_path / "wren-pipit.toml"
    profile.write_text((ROOT / "profiles" / "wren.toml").read_text(encoding="utf-8") + "\n" + toml.group(1))
    events_and_output = block("$ cat pipit.csv").split("\n")
    events = events_and_output[1:events_and_output.index("$ diffdeck input map profiles/wren-pipit.toml pipit.csv")]
    (tmp_path / "pipit.csv").write_text("\n".join(events) + "\n")
    assert main(["input", "map", str(profile), str(tmp_path / "pipit.csv")]) == 0
    printed = capsys.readouterr().out
    shown = block("$ diffdeck input map profiles/wren-pipit.toml").split("\n", 1)[1]
    assert printed == shown
    rows = {row.split(",")[0]: row.split(",") for row in printed.splitlines()[1:]}
    envelope = load_profile(profile).envelope
    assert float(rows["0.2"][1]) == 0.0 and rows["0.2"][3] == "1"            # held, stick not yet centred
    assert float(rows["0.4"][1]) == pytest.approx(shaped(32, 0, 255, 0.1, 0.2) * 0.3 * envelope.top_speed_mps)
    assert float(rows["0.5"][2]) == pytest.approx(-shaped(255 - 200, 0, 255, 0.1, 0.2) * 0.3
                                                  * envelope.top_turn_rate_radps)
    assert float(rows["0.6"][1]) == pytest.approx(shaped(32, 0, 255, 0.1, 0.2) * 0.4 * envelope.top_speed_mps)
    assert rows["0.7"][1:4] == ["0", "0", "0"] and rows["0.8"][4] == "fast"
