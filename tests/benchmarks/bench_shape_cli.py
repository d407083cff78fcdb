"""`diffdeck shape` on one-hour request traces at 100 Hz (360,000 cycles); target <= 15 s.

Two kinds of trace, because the shaper's cost depends on how often the request changes (each change is a re-plan):
- `held`: an operator's aims, a new request every 2 s, each held (1,800 rows), shaped for the full hour;
- `joystick`: a recorded joystick session, a new row every 10 ms with hand tremor on top of the aims, so the
  request changes every cycle. Timed on its first JOYSTICK_S seconds and projected to the hour (cycles / rate),
  so that `make bench` stays short while the shaper re-plans every cycle.
The verb runs in-process (the same `run(args)` the command line calls), reading the trace and writing the output
file, so each figure covers parsing, shaping and writing. Medians of a few runs.
"""

from __future__ import annotations

import argparse
import statistics
import tempfile
import time
from pathlib import Path

import numpy as np

from console.verbs import shape

PROFILE = Path(__file__).resolve().parents[2] / "profiles" / "wren.toml"
HOUR_S = 3600.0
RATE_HZ = 100.0
AIM_EVERY_S = 2.0
JOYSTICK_S = 60.0
RUNS = 3
TARGET_S = 15.0


def write_trace(path: Path, duration_s: float, row_every_s: float, tremor: bool, seed: int = 20261202) -> int:
    """Aims drawn over (and a little beyond) the wren envelope, one row per `row_every_s`; returns the row count."""
    rng = np.random.default_rng(seed)
    times = np.arange(int(round(duration_s / row_every_s))) * row_every_s
    aims = rng.uniform([-0.5, -3.0], [1.2, 3.0], size=(int(duration_s / AIM_EVERY_S) + 1, 2))
    requests = aims[(times // AIM_EVERY_S).astype(int)]
    if tremor:
        requests = requests + rng.normal(0.0, [0.01, 0.03], size=requests.shape)
    np.savetxt(path, np.column_stack([times, requests]), fmt=("%.2f", "%.4f", "%.4f"), delimiter=",",
               header="t_s,v_mps,omega_radps", comments="")
    return len(times)


def _time_verb(folder: Path, name: str, duration_s: float, row_every_s: float, tremor: bool) -> dict[str, object]:
    trace, out = folder / f"{name}.csv", folder / f"{name}-shaped.csv"
    rows = write_trace(trace, duration_s, row_every_s, tremor)
    args = argparse.Namespace(profile=str(PROFILE), requests=str(trace), output=str(out), rate_hz=RATE_HZ,
                              mode="synced", until_s=duration_s)
    seconds = []
    for _ in range(RUNS):
        start = time.perf_counter()
        shape.run(args)
        seconds.append(time.perf_counter() - start)
    with out.open() as handle:
        cycles = sum(1 for _ in handle) - 1
    median = statistics.median(seconds)
    hour_s = median * HOUR_S / duration_s
    return {
        "trace_rows": rows,
        "cycles": cycles,
        "seconds_median": round(median, 3),
        "cycles_per_s": round(cycles / median),
        "hour_s" if duration_s == HOUR_S else "hour_s_projected": round(hour_s, 2),
        "meets_target": hour_s <= TARGET_S,
    }


def run() -> dict[str, object]:
    with tempfile.TemporaryDirectory() as name:
        folder = Path(name)
        return {
            "target_hour_s": TARGET_S,
            "held": _time_verb(folder, "held", HOUR_S, AIM_EVERY_S, tremor=False),
            "joystick": _time_verb(folder, "joystick", JOYSTICK_S, 1.0 / RATE_HZ, tremor=True),
        }
