"""`diffdeck report RECORDING.csv [-o DIR] [--json]`: metrics, response fits, suggested limits, figures, summary."""

from __future__ import annotations

import argparse
import json
from pathlib import Path
from typing import TYPE_CHECKING

from rich import box
from rich.console import Console
from rich.table import Table

from console.bench.recording import read_recording
from console.errors import InputError, OutputError
from console.files import STDOUT, atomic_output
from console.replay import notable_moments
from console.tables import console_for

if TYPE_CHECKING:
    from console.bench.report import Report
    from console.bench.tuning import Tuning

NAME = "report"
HELP = "analyze a recording: step metrics, wheel response fits, suggested limits, polarity, wheel loop gains, figures"
ORDER = 70


def add_arguments(parser: argparse.ArgumentParser) -> None:
    parser.add_argument("recording", metavar="RECORDING.csv", help="a session recording (bench, play or drive)")
    parser.add_argument("-o", "--out", metavar="DIR", help="output folder (default: reports/<recording name>)")
    parser.add_argument("--json", action="store_true", help="print the report as one JSON object on stdout")
    parser.add_argument("--tolerance-mps", type=float, metavar="M_PER_S",
                        help="speed tracking error the suggested limits keep (default: 5 %% of the top speed)")
    parser.add_argument("--tau-c", type=float, metavar="SECONDS", dest="tau_c_s",
                        help="closed-loop time constant for the wheel speed loop gains of an `identify` run "
                             "(default: the identified dead time, the SIMC rule's tight choice)")


MAX_TAU_C_S = 60.0          # far slower than any wheel speed loop; a larger value is a typing error

TEXT_COLUMNS = ("segment", "axis")
NUMBER_COLUMNS = ("dead s", "rise s", "overshoot %", "settle s", "ss error", "peak accel", "peak jerk")


def _fmt(value: float | None, spec: str = ".3g") -> str:
    return "-" if value is None else format(value, spec)


def _segment_rows(report: Report) -> list[tuple[str, ...]]:
    rows: list[tuple[str, ...]] = []
    for s in report.segments:
        m = s.step
        rows.append((s.name, f"{s.axis} ({s.unit})", _fmt(m.dead_time_s if m else None),
                     _fmt(m.rise_time_s if m else None), _fmt(m.overshoot_pct if m else None, ".1f"),
                     _fmt(m.settling_time_s if m else None), _fmt(m.steady_state_error if m else None),
                     _fmt(s.peak_accel), _fmt(s.peak_jerk)))
    return rows


def print_segments(console: Console, report: Report, title: str) -> None:
    """The segment metrics, never cut: a table where it fits (piped output: as wide as it needs), else one line (or
    a few, wrapped between words) per segment."""
    rows = _segment_rows(report)
    table = Table(title=title, box=box.SIMPLE_HEAD, pad_edge=False)
    for column in TEXT_COLUMNS + NUMBER_COLUMNS:
        table.add_column(column, no_wrap=True, justify="left" if column in TEXT_COLUMNS else "right")
    for row in rows:
        table.add_row(*row)
    fitting = console_for(console, table)
    if fitting is not None:
        fitting.print(table)
        return
    console.print(title, markup=False, highlight=False)
    for row in rows:
        console.print(f"{row[0]} ({row[1]}): " + ", ".join(f"{name} {value}" for name, value
                                                            in zip(NUMBER_COLUMNS, row[2:])),
                      markup=False, highlight=False)


def print_tuning(console: Console, tuning: Tuning) -> None:
    """One line per wheel for the feed-forward and one for the gains (or why there are none), then the [sim] keys."""
    for wheel in tuning.wheels.values():
        ff = wheel.feedforward
        if ff is not None and not wheel.feedforward_problems:
            breaks = " / ".join(_fmt(wheel.break_away.get(way), ".4f") for way in ("forwards", "backwards"))
            console.print(f"{wheel.wheel} wheel feed-forward: kS {ff.static_duty:.4f}, kV {ff.duty_per_radps:.5f} "
                          f"duty per rad/s, kA {ff.duty_per_radps2:.3g} duty per rad/s^2 (R^2 {ff.r_squared:.4f}); "
                          f"break-away duty {breaks}", markup=False)
        gains, sampled = wheel.gains, wheel.gains_sampled
        if gains is None or sampled is None:
            console.print(f"{wheel.wheel} wheel: no loop gains: {'; '.join(wheel.problems)}", markup=False)
            continue
        kp, ki_t = sampled.per_period(tuning.period_s)
        console.print(f"{wheel.wheel} wheel: gain {wheel.gain:.4g} rad/s per duty, time constant "
                      f"{(wheel.tau_s or 0.0) * 1e3:.1f} ms, dead time {(wheel.dead_time_s or 0.0) * 1e3:.1f} ms; SIMC "
                      f"PI (tau_c {gains.tau_c_s * 1e3:.1f} ms): Kc {gains.kc:.4g} duty per rad/s, tau_I "
                      f"{gains.tau_i_s * 1e3:.1f} ms; every {tuning.period_s * 1e3:g} ms: Kp {kp:.4g}, Ki T "
                      f"{ki_t:.4g}", markup=False)
    snippet = tuning.sim_snippet()
    if snippet:
        console.print(snippet.rstrip(), markup=False, highlight=False, soft_wrap=True)   # whole lines: pasted as TOML


def run(args: argparse.Namespace) -> int:
    if args.tolerance_mps is not None and not args.tolerance_mps > 0:
        raise InputError("command line", "--tolerance-mps", args.tolerance_mps, "a speed > 0 in m/s")
    if args.tau_c_s is not None and not 0.0 < args.tau_c_s <= MAX_TAU_C_S:
        raise InputError("command line", "--tau-c", args.tau_c_s, f"a time > 0 and <= {MAX_TAU_C_S:g} s")
    recording = read_recording(args.recording)
    out = Path(args.out) if args.out else Path("reports") / Path(args.recording).stem
    if out.exists() and not out.is_dir():
        raise OutputError(str(out), "exists and is not a folder; give a folder for the report (-o DIR)")
    from console.bench.report import analyze, write_report  # scipy and matplotlib: only when a report is made

    report = analyze(recording, args.tolerance_mps, args.tau_c_s)
    paths = write_report(recording, report, out)
    if args.json:
        with atomic_output(STDOUT) as stdout:
            stdout.write(json.dumps(report.to_json(), indent=2) + "\n")
        return 0
    with atomic_output(STDOUT):                  # a full or closed standard output is one line too
        console = Console()
        print_segments(console, report, f"{Path(args.recording).name}: {report.program or 'recording'}")
        for wheel, fit in report.fits.items():
            if fit is not None:
                gates = "fails its quality gates" if report.fit_problems.get(wheel) else "passes its quality gates"
                console.print(f"{wheel} wheel: gain {fit.gain:.3f}, time constant {fit.tau_s * 1e3:.1f} ms, dead time "
                              f"{fit.dead_time_s * 1e3:.1f} ms (R^2 {fit.r2:.4f}, NRMSE {fit.nrmse:.4f}): {gates}",
                              markup=False)
        if report.limits is not None:
            console.print(report.limits_snippet(), markup=False, highlight=False)
        if report.polarity is not None:
            for finding in report.polarity.findings:
                console.print(f"polarity: {finding.kind}: {finding.text}", markup=False)
            if report.polarity.snippet():
                console.print(report.polarity.snippet(), markup=False, highlight=False)
            if report.polarity.candidates:
                console.print(report.polarity.candidate_blocks(), markup=False, highlight=False)
        if report.tuning is not None:
            print_tuning(console, report.tuning)
        for peak in report.body:
            console.print(f"body: {peak.text()}", markup=False)
        for note in report.notes:
            console.print(f"note: {note}", markup=False)
        for t_s, what, command in notable_moments(args.recording):      # watch it again (issue 14)
            console.print(f"at {t_s:.2f} s {what}: {command}", markup=False, highlight=False, soft_wrap=True)
        console.print(f"report: {out / 'summary.md'} (+ {', '.join(p.name for p in paths if p.name != 'summary.md')})")
    return 0
