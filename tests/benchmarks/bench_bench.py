"""Bench figures: a 60 s chirp on the simulated robot (virtual clock) and a report on a one-hour 100 Hz recording.

Targets (issue 5): the chirp in <= 1 s; the report in <= 10 s and <= 500 MB. They are reported, not asserted. The
report runs in a fresh subprocess so its peak RSS (VmHWM from /proc/self/status) is its own.
"""

from __future__ import annotations

import json
import subprocess
import sys
import tempfile
import time
from pathlib import Path

import numpy as np

ROOT = Path(__file__).resolve().parents[2]
WREN = ROOT / "profiles" / "wren.toml"
HOUR_S = 3600.0
RATE_HZ = 100.0

_REPORT_CHILD = """
import json, resource, sys, time
from pathlib import Path
t0 = time.perf_counter()
from console.bench.recording import read_recording
from console.bench.report import analyze, write_report
t1 = time.perf_counter()
rec = read_recording(sys.argv[1])
t2 = time.perf_counter()
report = analyze(rec)
t3 = time.perf_counter()
write_report(rec, report, Path(sys.argv[2]))
t4 = time.perf_counter()
try:   # VmHWM: this program's own peak (ru_maxrss would carry the parent's peak over the fork)
    peak = next(int(line.split()[1]) for line in open("/proc/self/status") if line.startswith("VmHWM")) / 1024
except OSError:
    peak = resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024
print(json.dumps({"import_s": t1 - t0, "read_s": t2 - t1, "analyze_s": t3 - t2, "write_s": t4 - t3,
                  "total_s": t4 - t0, "peak_rss_mb": peak}))
"""


def _chirp() -> dict[str, float]:
    from console.bench.program import builtin
    from console.bench.run import BenchRun
    from console.profile import load_profile

    profile = load_profile(WREN)
    program = builtin("chirp")
    times, cpu = [], []
    with tempfile.TemporaryDirectory() as tmp:
        for _ in range(3):
            start, start_cpu = time.perf_counter(), time.process_time()
            result = BenchRun(profile, program, out_dir=Path(tmp)).run_to_end()
            times.append(time.perf_counter() - start)
            cpu.append(time.process_time() - start_cpu)     # this process (loop, sim, recorder thread, ours)
            assert result.completed
    virtual = program.duration_s
    best = min(times)
    return {"chirp_program_s": virtual, "chirp_wall_s_median": float(np.median(times)), "chirp_wall_s_best": best,
            "chirp_cpu_s_median": float(np.median(cpu)), "chirp_x_real_time": virtual / best,
            "chirp_target_s": 1.0}


def _hour_recording(path: Path) -> None:
    """One hour at 100 Hz in the recorder's format: shaped-like steps and a first-order wheel response with noise."""
    from console.record import COLUMNS, POSE_COLUMNS

    n = int(HOUR_S * RATE_HZ)
    t = np.arange(1, n + 1) / RATE_HZ
    rng = np.random.default_rng(1)
    v = 0.4 * np.sign(np.sin(2 * np.pi * t / 8.0))          # an 8 s square wave of requests
    alpha = 1 - np.exp(-0.01 / 0.3)
    from scipy.signal import lfilter

    v_cmd = lfilter([alpha], [1, -(1 - alpha)], v)
    wheel = v_cmd / 0.062
    meas = lfilter([1 - np.exp(-0.01 / 0.06)], [1, -np.exp(-0.01 / 0.06)], wheel)
    left = meas + rng.normal(0, 0.05, n)
    right = meas + rng.normal(0, 0.05, n)
    zeros = np.zeros(n)
    columns = [t, v, zeros, v_cmd, zeros, wheel, wheel, left, right]
    with path.open("w") as f:
        f.write(",".join(COLUMNS + POSE_COLUMNS) + "\n")
        block = np.column_stack(columns + [zeros, zeros, zeros])
        lines = [",".join(f"{x!r}" for x in row[:9]) + ",armed," + ",".join(f"{x!r}" for x in row[9:])
                 for row in block.tolist()]
        f.write("\n".join(lines) + "\n")


def _report() -> dict[str, float]:
    with tempfile.TemporaryDirectory() as tmp:
        csv = Path(tmp) / "hour.csv"
        _hour_recording(csv)
        out = subprocess.run([sys.executable, "-c", _REPORT_CHILD, str(csv), str(Path(tmp) / "report")],
                             capture_output=True, text=True, cwd=ROOT, check=True)
        figures = json.loads(out.stdout.strip().splitlines()[-1])
        figures["csv_mb"] = csv.stat().st_size / 1e6
    figures.update({"report_rows": int(HOUR_S * RATE_HZ), "report_target_s": 10.0, "report_target_rss_mb": 500.0})
    return figures


def run() -> dict[str, float]:
    return {**_chirp(), **_report()}


if __name__ == "__main__":
    print(json.dumps(run(), indent=2))
