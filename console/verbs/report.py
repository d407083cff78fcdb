"""`diffdeck report RECORDING.csv [-o DIR] [--json]`: metrics, response fits, suggested limits, figures, summary."""

from __future__ import annotations

import argparse
import json
from pathlib import Path

from rich.console import Console
from rich.table import Table

from console.bench.recording import read_recording
from console.errors import InputError, OutputError
from console.files import STDOUT, atomic_output

NAME = "report"
HELP = "analyze a recording: step metrics, wheel response fits, suggested limits, polarity, figures"
ORDER = 70


def add_arguments(parser: argparse.ArgumentParser) -> None:
    parser.add_argument("recording", metavar="RECORDING.csv", help="a session recording (bench, play or drive)")
    parser.add_argument("-o", "--out", metavar="DIR", help="output folder (default: reports/<recording name>)")
    parser.add_argument("--json", action="store_true", help="print the report as one JSON object on stdout")
    parser.add_argument("--tolerance-mps", type=float, metavar="M_PER_S",
                        help="speed tracking error the suggested limits keep (default: 5 %% of the top speed)")


def run(args: argparse.Namespace) -> int:
    if args.tolerance_mps is not None and not args.tolerance_mps > 0:
        raise InputError("command line", "--tolerance-mps", args.tolerance_mps, "a speed > 0 in m/s")
    recording = read_recording(args.recording)
    out = Path(args.out) if args.out else Path("reports") / Path(args.recording).stem
    if out.exists() and not out.is_dir():
        raise OutputError(str(out), "exists and is not a folder; give a folder for the report (-o DIR)")
    from console.bench.report import analyze, write_report  # scipy and matplotlib: only when a report is made

    report = analyze(recording, args.tolerance_mps)
    paths = write_report(recording, report, out)
    if args.json:
        with atomic_output(STDOUT) as stdout:
            stdout.write(json.dumps(report.to_json(), indent=2) + "\n")
        return 0
    with atomic_output(STDOUT):                  # a full or closed standard output is one line too
        console = Console()
        table = Table(title=f"{Path(args.recording).name}: {report.program or 'recording'}")
        for column in ("segment", "axis", "dead s", "rise s", "overshoot %", "settle s", "ss error", "peak accel",
                       "peak jerk"):
            table.add_column(column)

        def fmt(value: float | None, spec: str = ".3g") -> str:
            return "-" if value is None else format(value, spec)

        for s in report.segments:
            m = s.step
            table.add_row(s.name, f"{s.axis} ({s.unit})", fmt(m.dead_time_s if m else None),
                          fmt(m.rise_time_s if m else None), fmt(m.overshoot_pct if m else None, ".1f"),
                          fmt(m.settling_time_s if m else None), fmt(m.steady_state_error if m else None),
                          fmt(s.peak_accel), fmt(s.peak_jerk))
        console.print(table)
        for wheel, fit in report.fits.items():
            if fit is not None:
                console.print(f"{wheel} wheel: gain {fit.gain:.3f}, time constant {fit.tau_s * 1e3:.1f} ms, dead time "
                              f"{fit.dead_time_s * 1e3:.1f} ms (R^2 {fit.r2:.4f}, NRMSE {fit.nrmse:.4f})")
        if report.limits is not None:
            console.print(report.limits_snippet(), markup=False, highlight=False)
        if report.polarity is not None:
            for finding in report.polarity.findings:
                console.print(f"polarity: {finding.kind}: {finding.text}", markup=False)
            if report.polarity.snippet():
                console.print(report.polarity.snippet(), markup=False, highlight=False)
        for note in report.notes:
            console.print(f"note: {note}", markup=False)
        console.print(f"report: {out / 'summary.md'} (+ {', '.join(p.name for p in paths if p.name != 'summary.md')})")
    return 0
