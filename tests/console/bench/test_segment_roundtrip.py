"""One segment type from the program to the report: a bound program run on the simulated robot and read back from
its recording gives the same segments, on the recording's time line; a sidecar of the older format still reads.

The outside reference is the program below: the durations, levels and kinds written in it, summed and scaled
by hand (percent levels are that share of the profile's envelope, as docs/bench.md states).
"""

from __future__ import annotations

import json
from dataclasses import replace
from pathlib import Path

import pytest

from console.bench.program import Axis, BoundSegment, Kind, Level, Segment, parse_program
from console.bench.recording import RecordingError, read_recording
from console.bench.report import analyze
from console.bench.run import BenchResult, BenchRun
from console.profile import load_profile

ROOT = Path(__file__).resolve().parents[3]
WREN = ROOT / "profiles" / "wren.toml"

EVERY_KIND = {"program": {"name": "every kind"}, "segment": [
    {"kind": "hold", "name": "wait", "duration_s": 0.5},
    {"kind": "step", "to": "40%", "lead_s": 0.25, "duration_s": 1.5},
    {"kind": "ramp", "from": "40%", "to": 0.1, "with": {"turn": "10%"}, "duration_s": 1.0},
    {"kind": "chirp", "axis": "turn", "offset": 0.2, "amplitude": "10%", "f0_hz": 0.5, "f1_hz": 2.0,
     "method": "logarithmic", "duration_s": 2.0},
    {"kind": "square", "offset": "10%", "amplitude": 0.05, "period_s": 0.5, "duration_s": 1.0},
    {"kind": "step", "axis": "left", "to": "15%", "bypass_shaper": True, "duration_s": 1.0},
    {"kind": "hold", "name": "rest", "duration_s": 1.0}]}
"""A program with every kind, percent and absolute levels, a constant on the other axis and a wheel step around the
shaper (the parsed form of a TOML program)."""
DURATIONS_S = (0.5, 1.5, 1.0, 2.0, 1.0, 1.0, 1.0)     # as written above


@pytest.fixture(scope="module")
def every_kind(tmp_path_factory: pytest.TempPathFactory) -> tuple[BenchRun, BenchResult]:
    program = parse_program(EVERY_KIND, "every-kind.toml", "every-kind.toml")
    run = BenchRun(load_profile(WREN), program, out_dir=tmp_path_factory.mktemp("rec"))
    return run, run.run_to_end()


def test_a_run_read_back_gives_the_bound_programs_segments_in_recording_time(
        every_kind: tuple[BenchRun, BenchResult]) -> None:
    run, result = every_kind
    assert result.completed
    t0 = json.loads(result.bench_sidecar.read_text())["program_start_s"]
    rec = read_recording(result.recording)
    assert rec.segments == tuple(replace(b, t_start_s=t0 + b.t_start_s, t_end_s=t0 + b.t_end_s)
                                 for b in run.bound.segments)
    assert [b.segment for b in rec.segments] == list(run.program.segments)      # the program as written, exactly
    starts = [0.0, 0.5, 2.0, 3.0, 5.0, 6.0, 7.0]                                 # DURATIONS_S summed by hand
    assert [b.t_start_s for b in rec.segments] == pytest.approx([t0 + s for s in starts])
    assert [b.t_end_s - b.t_start_s for b in rec.segments] == pytest.approx(DURATIONS_S)
    envelope = load_profile(WREN).envelope
    step, ramp, chirp = rec.segments[1], rec.segments[2], rec.segments[3]
    assert step.segment.end == Level(40.0, percent=True) and step.segment.lead_s == 0.25
    assert step.end == pytest.approx(0.4 * envelope.top_speed_mps)
    assert ramp.partner == pytest.approx(0.1 * envelope.top_turn_rate_radps) and ramp.end == 0.1
    assert (chirp.segment.kind, chirp.segment.axis, chirp.segment.method) == (Kind.CHIRP, Axis.TURN, "logarithmic")
    assert (chirp.segment.f0_hz, chirp.segment.f1_hz) == (0.5, 2.0)
    assert rec.segments[5].segment.bypass and rec.segments[5].end == pytest.approx(
        0.15 * envelope.limits.wheel_rate_radps)


def _format_1_segment(index: int, name: str, kind: str, t: tuple[float, float], start: float, end: float,
                      lead_s: float = 0.0) -> dict[str, object]:
    """A segment as format 1 ("diffdeck bench 1") wrote it: resolved levels only, no duration, no chirp."""
    return {"index": index, "name": name, "kind": kind, "axis": "speed", "bypass": False, "t_start_s": t[0],
            "t_end_s": t[1], "start": start, "end": end, "amplitude": 0.0, "partner": 0.0, "lead_s": lead_s,
            "period_s": 0.0}


def test_an_older_format_sidecar_still_reads(every_kind: tuple[BenchRun, BenchResult], tmp_path: Path) -> None:
    _, result = every_kind
    csv = tmp_path / "old.csv"
    csv.write_bytes(result.recording.read_bytes())
    side = json.loads(result.bench_sidecar.read_text())
    t0 = side["program_start_s"]
    side.update(format="diffdeck bench 1", segments=[
        _format_1_segment(0, "speed up", "step", (t0, t0 + 2.0), 0.0, 0.4, lead_s=0.5),
        _format_1_segment(1, "rest", "hold", (t0 + 2.0, t0 + 9.0), 0.0, 0.0)])
    (tmp_path / "old.csv.bench.json").write_text(json.dumps(side))
    rec = read_recording(csv)
    assert rec.segments == (
        BoundSegment(Segment(0, "speed up", Kind.STEP, Axis.SPEED, pytest.approx(2.0), start=Level(0.0),
                             end=Level(0.4), lead_s=0.5), t0, t0 + 2.0, 0.0, 0.4, 0.0, 0.0),
        BoundSegment(Segment(1, "rest", Kind.HOLD, Axis.SPEED, pytest.approx(7.0)), t0 + 2.0, t0 + 9.0, 0.0, 0.0,
                     0.0, 0.0))
    report = analyze(rec)
    assert [(s.name, s.kind, s.axis, s.edges) for s in report.segments] == [("speed up", "step", "speed", 1),
                                                                            ("rest", "hold", "speed", 0)]


def test_a_recording_without_bench_sidecar_is_one_segment_and_a_bad_segment_is_one_line(
        every_kind: tuple[BenchRun, BenchResult], tmp_path: Path) -> None:
    _, result = every_kind
    csv = tmp_path / "plain.csv"
    csv.write_bytes(result.recording.read_bytes())
    rec = read_recording(csv)
    (whole,) = rec.segments
    assert (whole.segment.kind, whole.segment.name, whole.t_start_s, whole.t_end_s) == (
        Kind.RECORD, "whole recording", rec.t[0], rec.t[-1])
    assert analyze(rec).segments[0].kind == "record"
    side = json.loads(result.bench_sidecar.read_text())
    side["segments"][2]["kind"] = "zigzag"
    (tmp_path / "plain.csv.bench.json").write_text(json.dumps(side))
    with pytest.raises(RecordingError) as error:
        read_recording(csv)
    assert str(error.value).startswith(f"{tmp_path / 'plain.csv.bench.json'}: segments = ")
    assert "zigzag" in str(error.value) and "\n" not in str(error.value)
