"""The loop core alone: one `LoopCore.step` (no clock, no port, no simulated robot), median and p99 in microseconds.

The core is driven as the runner drives it at 200 Hz while armed and cruising: each step gets the bytes of one
telemetry frame (every second step, as a robot answering at half the command rate) and a changing request, so the
shaper re-plans now and then. Times are per step, wall clock (`time.perf_counter_ns`) on a shared machine.
"""

from __future__ import annotations

import dataclasses
import time
from pathlib import Path

import numpy as np

from console.core.step import Inputs, LoopCore
from console.profile import load_profile
from console.protocol import Telemetry, encode

ROOT = Path(__file__).resolve().parents[2]
RATE_HZ = 200.0
STEPS = 20_000


def run() -> dict:
    wren = load_profile(ROOT / "profiles" / "wren.toml")
    profile = dataclasses.replace(wren, link=dataclasses.replace(wren.link, rate_hz=RATE_HZ))
    core = LoopCore(profile, "bench")
    dt = 1.0 / RATE_HZ
    telemetry = [encode(Telemetry(k % 65536, k % 65536, 100.0, 100.0, k, k, 12.0, 0)) for k in range(STEPS)]
    core.step(0.0, dt, Inputs(), telemetry[0])
    core.step(dt, dt, Inputs(arm=True), telemetry[1])
    times = np.empty(STEPS)
    clock = time.perf_counter_ns
    for k in range(STEPS):
        request = (0.3 + 0.2 * ((k // 400) % 2), 0.1 * ((k // 700) % 3 - 1))
        inputs = Inputs(request=request, ui_beat=True)
        received = telemetry[k] if k % 2 == 0 else b""
        t0 = clock()
        core.step((k + 2) * dt, dt, inputs, received)
        times[k] = clock() - t0
    assert core.failure is None and core.snapshot.state.value == "armed"
    return {
        "core_step_median_us": round(float(np.median(times)) / 1e3, 1),
        "core_step_p99_us": round(float(np.percentile(times, 99.0)) / 1e3, 1),
        "core_step_max_us": round(float(times.max()) / 1e3, 1),
        "rate_hz": RATE_HZ,
    }
