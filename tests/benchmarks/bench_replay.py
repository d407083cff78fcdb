"""Replay figures on a one-hour 100 Hz recording (360,000 rows): opening it to the first frame, seeking, playing.

The hour is the replay tests' scene (tests/console/replay/conftest.py: the real loop, shaper, simulated robot and
recorder on the virtual clock, with arming, a binding limit, an operator stop and a fault) repeated end to end with
its times shifted (from its first measured row on), so it has the real columns, flags, pose, sidecar and a few
thousand events.
- open_to_first_frame_s: `python -m console replay HOUR.csv` in a 120x40 tmux terminal, from launch until the first
  frame is on the screen (capture-pane polled every 20 ms; interpreter start and imports included);
  open_replay_s: the reading and indexing alone, in this process.
- seek_ms median / p99 / max: 200 jumps to random rows in a headless app (Textual's test driver, 120x40): the row
  found, its snapshot built and every panel handed its values (the trace and the top view rebuilt);
  seek_to_screen_ms: the same jumps timed until Textual has handled everything they caused, the repaint of the whole
  screen included (Textual's compositor: the same cost as any full-screen change on the drive screen).
- cpu_percent_playing_x1: the replay process (user + system) over DIFFDECK_BENCH_REPLAY_S seconds (default 5) of
  playing at x1, beside the drive console on the simulated robot driving (UI process and the loop's own process)
  over as long: the live console's figure.
Targets (issue 14): first frame <= 3 s; seek <= 50 ms; CPU at x1 <= the live console's. Reported, not asserted.
"""

from __future__ import annotations

import asyncio
import json
import os
import random
import re
import shutil
import sys
import tempfile
import time
from pathlib import Path

import numpy as np

from tests.e2e.tmux_console import TmuxConsole, tmux_missing_reason

ROOT = Path(__file__).resolve().parents[2]
HOUR_ROWS = 360_000
TARGETS = {"open_to_first_frame_s": 3.0, "seek_ms": 50.0}


def _cpu_s(pid: int) -> float:
    fields = Path(f"/proc/{pid}/stat").read_text().rsplit(")", 1)[1].split()
    return (int(fields[11]) + int(fields[12])) / os.sysconf("SC_CLK_TCK")     # utime + stime


def _family(pid: int) -> list[int]:
    """`pid` and its child processes (the drive console's loop process), from /proc."""
    found = [pid]
    for task in Path(f"/proc/{pid}/task").iterdir():
        try:
            found += [int(child) for child in (task / "children").read_text().split()]
        except OSError:
            pass
    return found


def _cpu_percent(pids: list[int], seconds: float) -> float:
    before, t0 = [_cpu_s(p) for p in pids], time.perf_counter()
    time.sleep(seconds)
    elapsed = time.perf_counter() - t0
    return sum(_cpu_s(p) - c for p, c in zip(pids, before)) / elapsed * 100.0


def hour_recording(folder: Path) -> Path:
    """The scene, repeated to 360,000 rows with its times shifted; the scene's sidecar beside it."""
    from tests.console.replay.conftest import drive_scene

    scene = drive_scene(folder / "scene.csv")
    header, *rows = scene.read_text(encoding="utf-8").splitlines()
    lines = [header, *rows]
    # the repeats start at the first measured row: a run an hour long opens its link once, not every 10 s
    measured = header.split(",").index("left_meas_radps")
    rows = rows[next(i for i, row in enumerate(rows) if row.split(",")[measured]):]
    times = [float(row.split(",", 1)[0]) for row in rows]
    rests = [row.split(",", 1)[1] for row in rows]
    span = times[-1] - times[0] + 0.01
    k = 1
    while len(lines) <= HOUR_ROWS:
        lines += [f"{t + k * span!r},{rest}" for t, rest in zip(times, rests)]
        k += 1
    hour = folder / "hour.csv"
    hour.write_text("\n".join(lines[: HOUR_ROWS + 1]) + "\n", encoding="utf-8")
    shutil.copy(folder / "scene.csv.json", folder / "hour.csv.json")
    return hour


def _open_in_terminal(hour: Path) -> tuple[float, TmuxConsole]:
    t0 = time.perf_counter()
    console = TmuxConsole([str(hour)], verb="replay", size=(120, 40))
    while time.perf_counter() - t0 < 60.0:
        if re.search(r"t 0\.01 / 3\d\d\d\.\d\d s", console.screen()):
            return time.perf_counter() - t0, console
        time.sleep(0.02)
    console.close()
    raise AssertionError("the replay's first frame did not come within 60 s")


async def _seeks(hour: Path, count: int = 200) -> tuple[list[float], list[float]]:
    from console.replay import open_replay
    from console.ui.replay import ReplayApp

    app = ReplayApp(open_replay(hour), render_hz=1.0)
    rows = random.Random(5).sample(range(HOUR_ROWS), count)
    updated, on_screen = [], []
    async with app.run_test(size=(120, 40)) as pilot:
        await pilot.pause()
        for row in rows:
            t0 = time.perf_counter()
            app.seek_row(row)
            updated.append(time.perf_counter() - t0)
            await pilot.pause()
            on_screen.append(time.perf_counter() - t0)
    return updated, on_screen


def _live_console_cpu(seconds: float) -> dict[str, float]:
    """The drive console on the simulated robot, armed and driving (latched, a speed preset) for `seconds`."""
    console = TmuxConsole(["profiles/wren.toml", "--mode", "latched"], size=(120, 40))
    try:
        console.armed()
        console.keys("4", "Left")
        time.sleep(1.0)
        pids = _family(console.pid())
        total = _cpu_percent(pids, seconds)
        console.keys("q")
        console.wait_closed(30.0)
    finally:
        console.close()
    return {"cpu_percent": total, "processes": len(pids)}


def run() -> dict[str, object]:
    from console.replay import open_replay

    seconds = float(os.environ.get("DIFFDECK_BENCH_REPLAY_S", "5"))
    figures: dict[str, object] = {"rows": HOUR_ROWS}
    with tempfile.TemporaryDirectory() as folder:
        hour = hour_recording(Path(folder))
        figures["csv_mb"] = round(hour.stat().st_size / 1e6, 1)
        t0 = time.perf_counter()
        replay = open_replay(hour)
        figures["open_replay_s"] = round(time.perf_counter() - t0, 3)
        figures["events"] = len(replay.marks)
        del replay
        for name, seeks in zip(("seek_ms", "seek_to_screen_ms"), asyncio.run(_seeks(hour))):
            ms = np.array(seeks) * 1e3
            figures.update({f"{name}_median": round(float(np.median(ms)), 1),
                            f"{name}_p99": round(float(np.percentile(ms, 99)), 1),
                            f"{name}_max": round(float(ms.max()), 1)})
        reason = tmux_missing_reason()
        if reason is not None:
            figures["terminal"] = {"skipped": reason}
        else:
            first_frame, console = _open_in_terminal(hour)
            try:
                figures["open_to_first_frame_s"] = round(first_frame, 2)
                console.keys("p")
                time.sleep(1.0)
                figures["cpu_percent_playing_x1"] = round(_cpu_percent([console.pid()], seconds), 1)
                playing = console.screen()
                figures["playing_shown"] = "▶ playing x1" in playing
                console.keys("q")
                console.wait_closed(15.0)
            finally:
                console.close()
            live = _live_console_cpu(seconds)
            figures["live_console_cpu_percent_driving"] = round(live["cpu_percent"], 1)
    figures["targets"] = TARGETS
    figures["met"] = {
        "open_to_first_frame": figures.get("open_to_first_frame_s", np.inf) <= TARGETS["open_to_first_frame_s"],
        "seek_p99": figures["seek_ms_p99"] <= TARGETS["seek_ms"],
        "cpu_at_x1_vs_live": figures.get("cpu_percent_playing_x1", np.inf)
        <= figures.get("live_console_cpu_percent_driving", -np.inf),
    }
    figures["load_average"] = os.getloadavg()
    return figures


if __name__ == "__main__":
    print(json.dumps(run(), indent=2), file=sys.stdout)
