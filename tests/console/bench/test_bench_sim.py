"""Bench runs on the simulated robot: identification, the polarity check and interrupted runs.

The outside reference is the simulated plant's own configuration (a first-order motor with dead time and a deadband,
checked against scipy's ODE solver in tests/console/sim/test_plant.py): the report must find the time constant the
[sim] section sets, and name the wiring fault the [sim] section injects.
"""

from __future__ import annotations

import json
import shutil
from pathlib import Path

import numpy as np
import pytest

from console.bench.polarity import record_observations
from console.bench.program import builtin, load_program
from console.bench.recording import read_recording
from console.bench.report import FIGURES, analyze, write_report
from console.bench.run import BenchRun, bench_sidecar_path
from console.bench.tomledit import edit_toml
from console.core.safety import SafetyState, StopCause
from console.profile import Profile, load_profile

ROOT = Path(__file__).resolve().parents[3]
WREN = ROOT / "profiles" / "wren.toml"


def _profile(tmp_path: Path, changes: dict[tuple[str, str], object], name: str = "robot.toml") -> Profile:
    path = tmp_path / name
    path.write_text(edit_toml(WREN.read_text(encoding="utf-8"), changes), encoding="utf-8")
    return load_profile(path)


@pytest.mark.parametrize("tau", [0.06, 0.15])
def test_report_fit_recovers_the_simulated_motor_time_constant(tmp_path: Path, tau: float) -> None:
    profile = _profile(tmp_path, {("sim", "motor_time_constant_s"): tau})
    result = BenchRun(profile, builtin("step"), out_dir=tmp_path).run_to_end()
    assert result.completed and result.cause is StopCause.PROGRAM_END
    report = analyze(read_recording(result.recording))
    for wheel in ("left", "right"):
        fit = report.fits[wheel]
        assert fit.tau_s == pytest.approx(tau, rel=0.15), wheel
        assert fit.gain == pytest.approx(1.0, rel=0.03)
        assert fit.r2 > 0.99
    # the step segments: the response reaches the request (the sim has unit gain) and settles
    speed_up = report.segments[0]
    assert speed_up.step.steady_state_error == pytest.approx(0.0, abs=0.01)
    assert speed_up.step.settling_time_s is not None
    assert speed_up.peak_accel_cmd == pytest.approx(profile.limits.accel_mps2, rel=0.03)
    assert report.limits is not None and report.limits.accel_mps2 > 0


def test_report_writes_figures_summary_and_json(tmp_path: Path) -> None:
    result = BenchRun(load_profile(WREN), builtin("square"), out_dir=tmp_path).run_to_end()
    rec = read_recording(result.recording)
    report = analyze(rec)
    paths = write_report(rec, report, tmp_path / "out")
    names = sorted(p.name for p in paths)
    assert names == sorted([*FIGURES, "summary.md", "report.json"])
    for figure in FIGURES:
        assert (tmp_path / "out" / figure).read_bytes()[:8] == b"\x89PNG\r\n\x1a\n"
        assert f"]({figure})" in (tmp_path / "out" / "summary.md").read_text()
    data = json.loads((tmp_path / "out" / "report.json").read_text())
    assert data["segments"][0]["edges"] == 8        # 16 s of a 4 s period: two edges per period
    assert "[limits]" in data["limits_snippet"]


FAULTS = [
    ({}, {"ok"}, {}),
    ({"swap_motors": True}, {"swapped"}, {"swap_motors": True}),
    ({"invert_left_motor": True}, {"inverted motor"}, {"invert_left": True, "invert_left_encoder": True}),
    ({"invert_right_motor": True}, {"inverted motor"}, {"invert_right": True, "invert_right_encoder": True}),
    ({"invert_left_encoder": True}, {"reversed encoder"}, {"invert_left_encoder": True}),
    ({"invert_right_encoder": True}, {"reversed encoder"}, {"invert_right_encoder": True}),
    ({"invert_right_motor": True, "invert_right_encoder": True}, {"mirrored side"}, {"invert_right": True}),
    ({"dead_left": True}, {"dead"}, {}),
    ({"dead_right": True}, {"dead"}, {}),
    ({"unit_scale": 1.25}, {"scale"}, {"trim_left": 0.8, "trim_right": 0.8}),
]


@pytest.mark.parametrize(("fault", "kinds", "fix"), FAULTS, ids=[str(f[0]) or "none" for f in FAULTS])
def test_polarity_check_names_each_wiring_fault_and_its_fix(tmp_path: Path, fault: dict, kinds: set,
                                                            fix: dict) -> None:
    profile = _profile(tmp_path, {("sim", key): value for key, value in fault.items()})
    result = BenchRun(profile, builtin("polarity"), out_dir=tmp_path).run_to_end()
    report = analyze(read_recording(result.recording))
    polarity = report.polarity
    assert {f.kind for f in polarity.findings} == kinds
    assert polarity.fix == pytest.approx(fix, rel=0.005)
    if fault:         # polarity before limits: a robot wired wrong gets no limits, and is told what to check first
        assert report.limits is None
        assert report.notes[0].startswith("check polarity first")
        assert "no limits suggested: a wiring fault comes first (see the polarity check)" in report.notes
    else:
        assert report.limits is not None and report.notes == ()
    if not fix:
        return
    # the proposed profile change really fixes it: the check on the corrected profile finds nothing
    fixed = _profile(tmp_path, {**{("sim", k): v for k, v in fault.items()},
                                **{("units", k): v for k, v in fix.items()}}, "fixed.toml")
    again = BenchRun(fixed, builtin("polarity"), out_dir=tmp_path / "fixed").run_to_end()
    assert [f.kind for f in analyze(read_recording(again.recording)).polarity.findings] == ["ok"]


def test_a_stopped_run_ends_under_control_and_keeps_its_recording(tmp_path: Path) -> None:
    run = BenchRun(load_profile(WREN), builtin("ramp"), out_dir=tmp_path)
    while run.progress.t_s < 3.0:            # mid ramp, moving
        assert run.step(10)
    assert abs(run.snapshot().shaped.v_mps) > 0.2
    run.stop()
    while run.step(10):
        pass
    assert run.snapshot().state is SafetyState.STOPPED
    result = run.close()
    assert not result.completed and result.cause is StopCause.OPERATOR
    rec = read_recording(result.recording)
    assert rec.data["v_mps"][-1] == 0.0
    assert len(rec.segments) < 4             # the segments after the stop are not claimed
    side = json.loads(result.bench_sidecar.read_text())
    assert side["completed"] is False and side["cause"] == "operator"


def test_segments_around_the_shaper_send_raw_steps_and_identify_the_motor(tmp_path: Path) -> None:
    profile = load_profile(WREN)
    program = load_program(ROOT / "profiles" / "programs" / "wheels-up-identify.toml")
    run = BenchRun(profile, program, out_dir=tmp_path)
    result = run.run_to_end()
    assert result.completed
    rec = read_recording(result.recording)
    first = rec.segments[1]                      # "left raw 20 %": the command jumps within one period
    rows = (rec.t >= first.t_start_s) & (rec.t < first.t_start_s + 0.02)
    assert rec.data["left_cmd_radps"][rows][-1] == pytest.approx(0.2 * profile.limits.wheel_rate_radps)
    report = analyze(rec)
    assert report.segments[1].bypass
    # the sim's torque limit (45 rad/s^2) slows the start of a raw 4 rad/s step a little: still within 15 %
    for wheel in ("left", "right"):
        assert report.fits[wheel].tau_s == pytest.approx(profile.sim.motor_time_constant_s, rel=0.15)


def _speed_error_p95(rec) -> float:
    d = rec.data
    measured = 0.5 * rec.wheel_radius_m * (d["left_meas_radps"] + d["right_meas_radps"])
    moving = rec.t < rec.segments[2].t_start_s          # the speed steps of the built-in `step`
    return float(np.nanpercentile(np.abs(d["v_mps"] - measured)[moving], 95))


def test_suggested_limits_keep_the_stated_tracking_error_on_a_second_run(tmp_path: Path) -> None:
    profile = load_profile(WREN)
    first = BenchRun(profile, builtin("step"), out_dir=tmp_path).run_to_end()
    limits = analyze(read_recording(first.recording)).limits
    assert limits.lag_source == "ramps"
    # the lag a first-order wheel model predicts: tau + dead time, plus about half a telemetry period of sampling
    assert limits.lag_s == pytest.approx(profile.sim.motor_time_constant_s + profile.sim.motor_dead_time_s
                                         + 0.5 / profile.sim.telemetry_rate_hz, rel=0.25)
    results = {}
    for factor in (1.0, 1.6):
        accel, jerk = factor * limits.accel_mps2, factor * limits.jerk_mps3
        changes = {("limits", "accel_mps2"): accel, ("limits", "decel_mps2"): accel, ("limits", "jerk_mps3"): jerk,
                   ("limits", "stop_decel_mps2"): max(profile.limits.stop_decel_mps2, 1.5 * accel),
                   ("limits", "stop_jerk_mps3"): max(profile.limits.stop_jerk_mps3, 1.5 * jerk)}
        again = BenchRun(_profile(tmp_path, changes, f"x{factor}.toml"), builtin("step"),
                         out_dir=tmp_path / str(factor)).run_to_end()
        results[factor] = _speed_error_p95(read_recording(again.recording))
    # within the stated error, allowing 10 % for the 50 Hz telemetry's sample-and-hold; faster ramps break it
    assert results[1.0] <= 1.1 * limits.speed_error_mps
    assert results[1.6] > 1.2 * limits.speed_error_mps


def _without_pose(result, tmp_path: Path) -> Path:
    """The same run as hardware would record it: no true pose columns."""
    lines = result.recording.read_text().splitlines()
    csv = tmp_path / "hardware.csv"
    csv.write_text("\n".join(",".join(line.split(",")[:10]) for line in lines) + "\n")
    for suffix in (".json", ".bench.json"):
        shutil.copy(result.recording.with_name(result.recording.name + suffix), csv.with_name(csv.name + suffix))
    return csv


OBSERVED = [
    ({"invert_left_motor": True}, {"left": "left backwards", "right": "right forwards"}, "inverted motor",
     {"invert_left": True, "invert_left_encoder": True}),
    ({"invert_left_encoder": True}, {"left": "left forwards", "right": "right forwards"}, "reversed encoder",
     {"invert_left_encoder": True}),
    ({"invert_right_motor": True, "invert_right_encoder": True}, {"left": "left forwards", "right": "right backwards"},
     "mirrored side", {"invert_right": True}),
    ({"swap_motors": True}, {"left": "right forwards", "right": "left forwards"}, "swapped", {"swap_motors": True}),
]


@pytest.mark.parametrize(("fault", "observed", "kind", "fix"), OBSERVED, ids=[o[2] for o in OBSERVED])
def test_on_hardware_the_operators_observation_settles_what_telemetry_cannot(
        tmp_path: Path, fault: dict, observed: dict, kind: str, fix: dict) -> None:
    profile = _profile(tmp_path, {("sim", key): value for key, value in fault.items()})
    csv = _without_pose(BenchRun(profile, builtin("polarity"), out_dir=tmp_path).run_to_end(), tmp_path)
    assert not read_recording(csv).has_pose
    record_observations(bench_sidecar_path(csv), observed)
    polarity = analyze(read_recording(csv)).polarity
    assert [f.kind for f in polarity.findings] == [kind]
    assert polarity.fix == fix


def _report_files(tmp_path: Path, fault: dict, program: str) -> tuple[object, str, dict]:
    profile = _profile(tmp_path, {("sim", key): value for key, value in fault.items()})
    rec = read_recording(BenchRun(profile, builtin(program), out_dir=tmp_path).run_to_end().recording)
    report = analyze(rec)
    write_report(rec, report, tmp_path / "out")
    return (report, (tmp_path / "out" / "summary.md").read_text(),
            json.loads((tmp_path / "out" / "report.json").read_text()))


def test_a_polarity_run_on_a_robot_wired_wrong_suggests_no_limits(tmp_path: Path) -> None:
    # the case: the wheel fits mean nothing (R^2 about 0.04 and 0, a dead time stuck at the 1 s bound)
    report, summary, data = _report_files(tmp_path, {"swap_motors": True, "invert_right_encoder": True}, "polarity")
    assert report.limits is None and data["limits_snippet"] is None
    assert "[limits]" not in summary and "None: see the notes at the top" in summary
    left = report.fit_problems["left"]
    assert any(p.startswith("R^2") for p in left) and any(p.startswith("dead time at its search bound") for p in left)
    assert any(p.startswith("R^2") for p in report.fit_problems["right"])
    assert data["notes"] == list(report.notes) and data["notes"][0].startswith("check polarity first")
    for note in data["notes"]:
        assert f"- {note}" in summary
    assert any(n.startswith("left wheel fit fails its quality gates") for n in data["notes"])


def test_a_chirp_on_a_robot_with_a_reversed_encoder_suggests_no_limits(tmp_path: Path) -> None:
    report, summary, data = _report_files(tmp_path, {"invert_right_encoder": True}, "chirp")
    # the encoder counts backwards: the measured right wheel is the true one negated, a gain of -1
    assert report.fits["right"].gain == pytest.approx(-1.0, rel=0.02)
    assert report.fits["left"].gain == pytest.approx(1.0, rel=0.02)
    assert report.limits is None and data["limits_snippet"] is None
    assert report.fit_problems["left"] == () and report.fit_problems["right"][0].startswith("gain")
    assert data["notes"][0] == ("check polarity first: the right wheel's fit has a gain of the wrong sign; run the "
                                "`polarity` bench program and fix [units] before tuning limits")
    assert "no limits suggested: the right wheel fit fails its quality gates" in data["notes"]
    assert "| right | -1.000 |" in summary


def test_without_an_observation_an_ambiguous_wiring_gets_one_block_per_candidate_and_the_check(
        tmp_path: Path) -> None:
    # swapped motors plus a reversed right encoder, on hardware (no true pose) and with nobody watching the wheels
    fault = {"swap_motors": True, "invert_right_encoder": True}
    profile = _profile(tmp_path, {("sim", key): value for key, value in fault.items()})
    csv = _without_pose(BenchRun(profile, builtin("polarity"), out_dir=tmp_path).run_to_end(), tmp_path)
    report = analyze(read_recording(csv))
    polarity = report.polarity
    assert polarity.snippet() == "" and polarity.fix == {}            # no single block to paste
    assert [f.kind for f in polarity.findings] == ["ambiguous"]
    assert len(polarity.candidates) >= 2
    assert len({tuple(sorted(c.hand_turn.items())) for c in polarity.candidates}) == len(polarity.candidates)
    write_report(read_recording(csv), report, tmp_path / "out")
    summary = (tmp_path / "out" / "summary.md").read_text()
    assert "Profile change:" not in summary and summary.count("\n[units]\n") == len(polarity.candidates)
    # what a hand turn shows on this robot, from the [sim] keys' meaning: the encoders are not swapped, the left one
    # counts the right way, the right one backwards
    truth = {"left": ("left", 1), "right": ("right", -1)}
    for candidate in polarity.candidates:
        assert candidate.check and candidate.fix
        fixed = _profile(tmp_path, {**{("sim", k): v for k, v in fault.items()},
                                    **{("units", k): v for k, v in candidate.fix.items()}}, "fixed.toml")
        again = BenchRun(fixed, builtin("polarity"), out_dir=tmp_path / "fixed").run_to_end()
        kinds = [f.kind for f in analyze(read_recording(again.recording)).polarity.findings]
        # the block the hand turn picks fixes the robot; every other block leaves it wired wrong
        assert (kinds == ["ok"]) == (candidate.hand_turn == truth), (candidate, kinds)


def test_every_figure_names_recording_and_robot_labels_segments_and_shows_the_failed_gates(
        tmp_path: Path, monkeypatch: pytest.MonkeyPatch) -> None:
    import console.bench.report as report_module

    seen = {}
    save = report_module._save

    def capture(fig, path, bottom=0.0):
        texts = [t.get_text() for t in fig.texts]
        labels = [label.get_text() for ax in fig.findobj(lambda o: hasattr(o, "get_xticklabels"))
                  for label in ax.get_xticklabels()]
        legends = [t.get_text() for ax in fig.axes if ax.get_legend() for t in ax.get_legend().get_texts()]
        seen[path.name] = (fig._suptitle.get_text(), texts, labels, legends)
        return save(fig, path, bottom)

    monkeypatch.setattr(report_module, "_save", capture)
    profile = _profile(tmp_path, {("sim", "invert_right_encoder"): True})
    rec = read_recording(BenchRun(profile, builtin("step"), out_dir=tmp_path).run_to_end().recording)
    write_report(rec, analyze(rec), tmp_path / "out")
    assert sorted(seen) == sorted(FIGURES)
    for name, (title, texts, labels, _) in seen.items():
        assert rec.path.name in title and profile.name in title, name
        assert "1 speed down" in labels and "3 turn down" in labels, name
        assert any("no limits suggested" in text for text in texts), name
    # a healthy robot: the stated tolerance band is in the tracking figure's legend
    seen.clear()
    rec = read_recording(BenchRun(load_profile(WREN), builtin("step"), out_dir=tmp_path / "ok").run_to_end().recording)
    report = analyze(rec)
    write_report(rec, report, tmp_path / "ok" / "out")
    assert f"stated tolerance \u00b1{report.limits.speed_error_mps:.3g} m/s" in seen["tracking.png"][3]
