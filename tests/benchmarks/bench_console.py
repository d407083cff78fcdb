"""The drive console on the simulated robot at 200 Hz in a real terminal (tmux), beside the same loop with no UI.

For DIFFDECK_BENCH_CONSOLE_S seconds (default 30) each:
- console: `python -m console drive profiles/wren.toml --rate-hz 200` in a 120x40 tmux session (the UI process and
  the loop's own process, console.loop_process; CPU and memory are the sum of both), armed, with a
  driving key (an arrow) every 0.6 s; each nudge ramps in well under that, so the frame on the wire is steady when
  the next key comes and "the first changed frame" is the one the key caused. The link is `trace+sim`: the loop's
  process logs every write with its time (console/links.py WireLog, CLOCK_MONOTONIC like the bench's own clock); the
  bench notes when it sent each key to tmux and when tmux had written it to the pty. The loop's figures come from
  the session's recording sidecar.
- no UI: the same profile, loop (as a thread), sim and request pattern in a plain process (request() every 0.6 s).
Figures: loop period error p99 / max, missed periods, key (or request) to first changed frame p50 / p99 / max,
process CPU in % of one core (user + system over the driving time), resident memory (MB, peak).
Targets: p99 <= 1 ms, max <= 2 ms, no missed period, key-to-wire p99 <= one period + 2 ms, CPU <= 25 %,
RSS <= 150 MB. Reported, not asserted: they depend on the machine and on what else runs on it.
"""

from __future__ import annotations

import json
import os
import subprocess
import sys
import tempfile
import time
from pathlib import Path

import numpy as np

from tests.benchmarks.wire import traced, wheel_frame_changes, wire_log
from tests.e2e.tmux_console import ROOT, TmuxConsole, tmux_missing_reason

RATE_HZ = 200.0
KEY_EVERY_S = 0.6
KEYS = ("Up", "Up", "Left", "Up", "Right", "Down", "Left", "Down", "Right", "Down")   # net zero over a round
NUDGES = {"Up": (1, 0), "Down": (-1, 0), "Left": (0, 1), "Right": (0, -1)}
SPEED_STEP_MPS = 0.05
TURN_STEP_RADPS = 0.25
TARGETS = {"period_error_p99_ms": 1.0, "period_error_max_ms": 2.0, "missed_periods": 0,
           "key_to_wire_p99_ms": 1e3 / RATE_HZ + 2.0, "cpu_percent": 25.0, "rss_mb": 150.0}


def _cpu_s(pid: int) -> float:
    fields = Path(f"/proc/{pid}/stat").read_text().rsplit(")", 1)[1].split()
    return (int(fields[11]) + int(fields[12])) / os.sysconf("SC_CLK_TCK")     # utime + stime


def _children(pid: int) -> list[int]:
    """Child processes of `pid` (the console's loop process), from /proc."""
    found: list[int] = []
    for task in Path(f"/proc/{pid}/task").iterdir():
        try:
            found += [int(child) for child in (task / "children").read_text().split()]
        except OSError:
            pass
    return found


def _peak_rss_mb(pid: int) -> float:
    for line in Path(f"/proc/{pid}/status").read_text().splitlines():
        if line.startswith("VmHWM:"):
            return int(line.split()[1]) / 1024.0
    return float("nan")


def _first_changes_ms(sent: list[float], wire: list[float]) -> dict[str, float | int]:
    """For each key time, ms until the first changed frame after it (keys with no frame before the next key drop)."""
    wire_t = np.array(wire)
    delays = []
    for i, t in enumerate(sent):
        after = wire_t[wire_t > t]
        limit = sent[i + 1] if i + 1 < len(sent) else np.inf
        if after.size and after[0] < limit:
            delays.append((after[0] - t) * 1e3)
    if not delays:
        return {"samples": 0}
    d = np.array(delays)
    return {"samples": int(d.size), "unanswered": len(sent) - int(d.size), "p50_ms": float(np.percentile(d, 50)),
            "p99_ms": float(np.percentile(d, 99)), "max_ms": float(d.max())}


def _loop_figures(loop: dict) -> dict[str, float | int]:
    return {"period_error_p50_ms": loop["period_error_p50_s"] * 1e3,
            "period_error_p99_ms": loop["period_error_p99_s"] * 1e3,
            "period_error_max_ms": loop["period_error_max_s"] * 1e3, "missed_periods": loop["overruns"],
            "cycles": loop["cycles"]}


def _console(duration_s: float, folder: Path) -> dict[str, object]:
    console = TmuxConsole([str(ROOT / "profiles" / "wren.toml"), "--link", "trace+sim", "--record",
                           "--rate-hz", f"{RATE_HZ:g}", "--mode", "latched",
                           "--speed-step-mps", f"{SPEED_STEP_MPS}", "--turn-step-radps", f"{TURN_STEP_RADPS}"],
                          size=(120, 40), cwd=folder)
    try:
        console.armed()
        pid = console.pid()
        family = [pid, *_children(pid)]          # the UI process and the loop's own process
        sent: list[float] = []
        in_pty: list[float] = []
        cpu0, t0 = [_cpu_s(p) for p in family], time.perf_counter()
        k = 0
        while time.perf_counter() - t0 < duration_s:
            next_t = t0 + (k + 1) * KEY_EVERY_S
            time.sleep(max(0.0, next_t - time.perf_counter()))
            sent.append(time.perf_counter())
            console.keys(KEYS[k % len(KEYS)])
            in_pty.append(time.perf_counter())       # send-keys returns once tmux has written the key to the pty
            k += 1
        elapsed = time.perf_counter() - t0
        cpu = [(_cpu_s(p) - c0) / elapsed * 100.0 for p, c0 in zip(family, cpu0)]
        rss = [_peak_rss_mb(p) for p in family]
        screen = console.screen()
        console.keys("q")
        closed = console.wait_closed(30.0)
    finally:
        console.close()
    sidecars = list((folder / "recordings").glob("*.csv.json"))
    if not closed or len(sidecars) != 1:
        return {"error": "the console did not close and write its recording", "screen": screen}
    wire = [t for t, _ in wheel_frame_changes(wire_log(folder))]
    return {
        **_loop_figures(json.loads(sidecars[0].read_text())["loop"]),
        "key_to_wire_from_send_keys": _first_changes_ms(sent, wire),
        "key_to_wire_from_key_in_pty": _first_changes_ms(in_pty, wire),
        "keys_sent": len(sent),
        "cpu_percent": sum(cpu), "rss_mb": sum(rss), "processes": len(family),
        "cpu_percent_per_process": cpu, "rss_mb_per_process": rss,
    }


def _headless_main(duration_s: float, out: Path) -> None:
    """The same loop, sim and request pattern with no UI (run in its own process, so CPU and RSS are its own)."""
    import dataclasses

    from console.links import open_link
    from console.loop import ControlLoop, WallClock
    from console.profile import load_profile
    from shaping.shaper import StopKind

    wren = load_profile(ROOT / "profiles" / "wren.toml")
    profile = dataclasses.replace(wren, link=dataclasses.replace(wren.link, rate_hz=RATE_HZ, url="sim"))
    link = open_link(profile.link.url, profile)
    transport = traced(link.transport, out.parent / "headless")
    loop = ControlLoop(profile, transport, WallClock(), sim=link.sim)
    requests: list[float] = []
    loop.start()
    time.sleep(0.5)
    loop.arm()
    time.sleep(0.3)
    v = omega = 0.0
    cpu0, t0 = time.process_time(), time.perf_counter()
    k = 0
    while time.perf_counter() - t0 < duration_s:
        time.sleep(max(0.0, t0 + (k + 1) * KEY_EVERY_S - time.perf_counter()))
        dv, dw = NUDGES[KEYS[k % len(KEYS)]]
        v, omega = v + dv * SPEED_STEP_MPS, omega + dw * TURN_STEP_RADPS
        requests.append(time.perf_counter())
        loop.request(v, omega)
        k += 1
    cpu = (time.process_time() - cpu0) / (time.perf_counter() - t0) * 100.0
    loop.stop(StopKind.CONTROLLED)
    time.sleep(1.5)
    loop.close()
    out.write_text(json.dumps({"loop": dataclasses.asdict(loop.stats()), "cpu_percent": cpu,
                               "rss_mb": _peak_rss_mb(os.getpid()), "requests": requests,
                               "wire": wheel_frame_changes(transport.path)}))


def _no_ui(duration_s: float, folder: Path) -> dict[str, object]:
    out = folder / "headless-trace.json"
    subprocess.run([sys.executable, "-m", "tests.benchmarks.bench_console", "--headless", str(duration_s), str(out)],
                   cwd=ROOT, check=True)
    trace = json.loads(out.read_text())
    requests = trace["requests"]
    return {**_loop_figures(trace["loop"]),
            "request_to_wire": _first_changes_ms(requests, [t for t, _ in trace["wire"]]),
            "cpu_percent": trace["cpu_percent"], "rss_mb": trace["rss_mb"]}


def run() -> dict[str, object]:
    reason = tmux_missing_reason()
    if reason is not None:
        return {"skipped": reason}
    duration_s = float(os.environ.get("DIFFDECK_BENCH_CONSOLE_S", "30"))
    with tempfile.TemporaryDirectory() as folder:
        console = _console(duration_s, Path(folder))
        headless = _no_ui(duration_s, Path(folder))
    met = {}
    if "error" not in console:
        met = {
            "period_error_p99": console["period_error_p99_ms"] <= TARGETS["period_error_p99_ms"],
            "period_error_max": console["period_error_max_ms"] <= TARGETS["period_error_max_ms"],
            "no_missed_period": console["missed_periods"] == 0,
            "key_to_wire_p99": console["key_to_wire_from_key_in_pty"].get("p99_ms", np.inf)
            <= TARGETS["key_to_wire_p99_ms"],
            "cpu": console["cpu_percent"] <= TARGETS["cpu_percent"],
            "rss": console["rss_mb"] <= TARGETS["rss_mb"],
        }
    return {"rate_hz": RATE_HZ, "duration_s": duration_s, "console": console, "no_ui": headless,
            "targets": TARGETS, "met": met, "load_average": os.getloadavg(), "cpus": os.cpu_count()}


if __name__ == "__main__":
    if sys.argv[1:2] == ["--headless"]:
        _headless_main(float(sys.argv[2]), Path(sys.argv[3]))
    else:
        print(json.dumps(run(), indent=2))
