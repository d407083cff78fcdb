"""`report` and `calibrate` on the command line: bad recordings are one line and exit 2; calibrate's files."""

from __future__ import annotations

import os
import shutil
from pathlib import Path
from typing import Any

import pytest

from console import files
from console.bench.program import builtin
from console.bench.run import BenchRun
from console.cli import main
from console.errors import InputError
from console.profile import load_profile
from console.record import COLUMNS
from console.verbs.calibrate import parse_end_position
from tests.console.faults import DiskFillsUp

ROOT = Path(__file__).resolve().parents[3]
WREN = ROOT / "profiles" / "wren.toml"
HEADER = ",".join(COLUMNS)


def _rows(n: int, start: float = 0.01, empty: bool = False) -> str:
    return "".join(f"{start + k * 0.01:.2f},0,0,0,0,0,0,{'' if empty else 0},{'' if empty else 0},disarmed\n"
                   for k in range(n))


BAD = [
    (None, "file", "no such file; give the path of a CSV recording"),
    ("", "header", "header beginning t_s,v_req_mps"),
    ("time,speed\n1,2\n", "header", "header beginning"),
    (HEADER + "\n" + _rows(5), "rows", "at least 20"),
    (HEADER + "\n" + _rows(30) + "0.40,0,zero,0,0,0,0,,,armed\n", "line 32, omega_req_radps = 'zero'",
     "a finite number, or empty (or nan) where nothing was measured"),
    (HEADER + "\n" + _rows(30) + "0.40,0,0\n", "line 32 = '3 fields'", "10 comma-separated fields, as in the header"),
    (HEADER + "\n" + _rows(30) + _rows(5, start=0.05), "line 32 t_s", "strictly increasing"),
    (HEADER + "\n" + _rows(30, empty=True), "left_meas_radps", "measured wheel rates"),
]


@pytest.mark.parametrize(("text", "key", "allowed"), BAD)
def test_bad_recordings_are_one_line_and_exit_2(tmp_path: Path, capsys: pytest.CaptureFixture[str],
                                                text: str | None, key: str, allowed: str) -> None:
    path = tmp_path / "rec.csv"
    if text is not None:
        path.write_text(text)
    code = main(["report", str(path), "-o", str(tmp_path / "out")])
    err = capsys.readouterr().err
    assert code == 2
    assert err.count("\n") == 1 and str(path) in err and key in err and allowed in err, err
    assert not (tmp_path / "out").exists()


def test_a_broken_bench_sidecar_is_one_line(tmp_path: Path, capsys: pytest.CaptureFixture[str]) -> None:
    result = BenchRun(load_profile(WREN), builtin("spin"), out_dir=tmp_path).run_to_end()
    result.bench_sidecar.write_text("{ not json")
    assert main(["report", str(result.recording), "-o", str(tmp_path / "out")]) == 2
    err = capsys.readouterr().err
    assert err.count("\n") == 1 and result.bench_sidecar.name in err


def test_a_recording_without_sidecars_is_one_segment(tmp_path: Path, capsys: pytest.CaptureFixture[str]) -> None:
    result = BenchRun(load_profile(WREN), builtin("spin"), out_dir=tmp_path).run_to_end()
    bare = tmp_path / "bare.csv"
    shutil.copy(result.recording, bare)
    assert main(["report", str(bare), "-o", str(tmp_path / "out"), "--json"]) == 0
    out = capsys.readouterr().out
    assert '"whole recording"' in out and "no geometry" in out


def test_calibrate_writes_a_corrected_copy_and_write_keeps_a_backup(tmp_path: Path,
                                                                    capsys: pytest.CaptureFixture[str]) -> None:
    profile = tmp_path / "cart.toml"
    text = WREN.read_text().replace("wheel_radius_ratio = 1.0", "wheel_radius_ratio = 1.004")
    profile.write_text(text)
    args = ["calibrate", str(profile), "--side-m", "2", "--out", str(tmp_path / "rec")]
    assert main(args) == 0
    copy = tmp_path / "cart.calibrated.toml"
    assert profile.read_text() == text                          # the original untouched
    corrected = load_profile(copy)
    assert corrected.units.trim_right < 1.0 < corrected.units.trim_left   # the larger right wheel turns slower
    assert "x smaller" in capsys.readouterr().err
    assert main([*args, "--write"]) == 0
    assert (tmp_path / "cart.toml.bak").read_text() == text
    assert load_profile(profile).units.trim_left == pytest.approx(corrected.units.trim_left, rel=1e-3)
    assert "# 124 mm wheels" in profile.read_text()              # comments kept


def test_calibrate_rejects_a_side_too_short_to_stop_in(tmp_path: Path, capsys: pytest.CaptureFixture[str]) -> None:
    assert main(["calibrate", str(WREN), "--side-m", "0.01", "--out", str(tmp_path)]) == 2
    assert "--side-m" in capsys.readouterr().err


@pytest.mark.parametrize(("text", "expected"), [("0.12 -0.05", (0.12, -0.05)), ("0.1, 0.2\n", (0.1, 0.2))])
def test_typed_end_positions(text: str, expected: tuple[float, float]) -> None:
    assert parse_end_position(text) == pytest.approx(expected)


@pytest.mark.parametrize("text", ["", "0.1", "a b", "1 2 3", "nan 0", "100 0"])
def test_bad_typed_end_positions(text: str) -> None:
    with pytest.raises(InputError, match="end position"):
        parse_end_position(text)


HEADERS = ("segment", "axis", "dead s", "rise s", "overshoot %", "settle s", "ss error", "peak accel", "peak jerk")


def test_the_segment_table_keeps_every_header_and_number_whole_when_piped(tmp_path: Path,
                                                                          capsys: pytest.CaptureFixture[str]) -> None:
    result = BenchRun(load_profile(WREN), builtin("step"), out_dir=tmp_path).run_to_end()
    assert main(["report", str(result.recording), "-o", str(tmp_path / "out")]) == 0     # captured: a pipe
    out = capsys.readouterr().out
    header = next(line for line in out.splitlines() if "segment" in line and "peak jerk" in line)
    for name in HEADERS:
        assert name in header
    assert "\u2026" not in out                      # rich's ellipsis: nothing was cut
    assert "turn up" in out and "turn (rad/s)" in out


def test_in_a_narrow_terminal_the_segments_are_lines_instead_of_a_cut_table(tmp_path: Path) -> None:
    from io import StringIO

    from rich.console import Console

    from console.bench.recording import read_recording
    from console.bench.report import analyze
    from console.verbs.report import print_segments

    result = BenchRun(load_profile(WREN), builtin("step"), out_dir=tmp_path).run_to_end()
    report = analyze(read_recording(result.recording))
    screen = StringIO()
    print_segments(Console(file=screen, width=60, force_terminal=True, color_system=None), report, "title")
    text = screen.getvalue()
    assert "\u2026" not in text
    speed_up = report.segments[0]
    joined = " ".join(text.split())                  # lines wrap between words only
    assert f"speed up (speed (m/s)): dead s {speed_up.step.dead_time_s:.3g}," in joined
    assert f"peak jerk {speed_up.peak_jerk:.3g}" in joined
    assert max(len(line) for line in text.splitlines()) <= 60


def test_a_disk_that_fills_while_the_report_is_written_leaves_no_new_file(
        tmp_path: Path, capsys: pytest.CaptureFixture[str], monkeypatch: pytest.MonkeyPatch) -> None:
    result = BenchRun(load_profile(WREN), builtin("spin"), out_dir=tmp_path).run_to_end()
    out = tmp_path / "out"
    out.mkdir()
    (out / "summary.md").write_text("previous\n")
    real, opened = os.fdopen, []

    def filling(*args: Any, **kwargs: Any) -> Any:
        """The first two files written whole, then the disk is full (ENOSPC, IEEE Std 1003.1-2017, write())."""
        handle = real(*args, **kwargs)
        opened.append(handle)
        return DiskFillsUp(handle) if len(opened) > 2 else handle

    monkeypatch.setattr(files.os, "fdopen", filling)
    assert main(["report", str(result.recording), "-o", str(out)]) == 6
    assert len(opened) > 2                                    # files had been written before the disk filled up
    assert [path.name for path in out.iterdir()] == ["summary.md"]
    assert (out / "summary.md").read_text() == "previous\n"  # the old report stays as it was
    err = capsys.readouterr().err
    assert err.count("\n") == 1 and "No space left" in err


def test_calibrate_refuses_an_output_it_could_not_write_before_any_run(tmp_path: Path,
                                                                      capsys: pytest.CaptureFixture[str]) -> None:
    real = tmp_path / "wren.toml"
    shutil.copy(WREN, real)
    link = tmp_path / "robot.toml"
    link.symlink_to(real)          # --write would replace the link, not the profile: refused, and nothing moved
    assert main(["calibrate", str(link), "--write"]) == 6
    err = capsys.readouterr().err
    assert err.count("\n") == 1 and "exists and is a symlink" in err and "run 1" not in err
    assert real.read_text() == WREN.read_text()
