"""Virtual-clock speed of the simulated robot, as a multiple of real time (target >= 200 x).

The robot is driven the way the control loop drives it on a virtual clock: a figure-of-eight wheel command every
10 ms (100 Hz) over the in-memory link, then `advance(0.01)`. Two figures: the robot alone (command bytes encoded
beforehand, telemetry read and discarded) and with the console side's encoding and decoding included. Medians of
REPEATS runs of SIM_S simulated seconds each; plus the plant's own cost per 1 ms sub-step. Wall-clock figures
(perf_counter) are the target's; the *_cpu figures (this process's CPU time) show what the code costs when other
work shares the machine (the load average is reported beside them).
"""

from __future__ import annotations

import math
import os
import statistics
import threading
import time
from pathlib import Path

from console.profile import load_profile
from console.protocol import Codec, WheelCommand
from console.sim.firmware import SUBSTEP_S, SimRobot
from console.sim.serve import run_wall_clock

PROFILE = Path(__file__).resolve().parents[2] / "profiles" / "wren.toml"
SIM_S = 20.0
PERIOD_S = 0.01
REPEATS = 5
TARGET_X = 200.0
WALL_S = 3.0


def _commands(units) -> list[tuple[float, float]]:
    """Figure-of-eight wheel commands (firmware unit), one per period; the first is the release (0, 0)."""
    out = [(0.0, 0.0)]
    for k in range(1, round(SIM_S / PERIOD_S)):
        swing = 3.0 * math.sin(2.0 * math.pi * k * PERIOD_S / 8.0)
        out.append(units.to_motor(10.0 + swing, 10.0 - swing))
    return out


def _run_once(with_console_codec: bool) -> tuple[float, float]:
    profile = load_profile(PROFILE)
    robot = SimRobot(profile)
    end = robot.console_end
    codec = Codec()
    commands = _commands(profile.units)
    frames = [codec.encode(WheelCommand(k % 65536, left, right)) for k, (left, right) in enumerate(commands)]
    start, start_cpu = time.perf_counter(), time.process_time()
    if with_console_codec:
        for k, (left, right) in enumerate(commands):
            end.write(codec.encode(WheelCommand(k % 65536, left, right)))
            robot.advance(PERIOD_S)
            codec.feed(end.read())
    else:
        for frame in frames:
            end.write(frame)
            robot.advance(PERIOD_S)
            end.read()
    elapsed, elapsed_cpu = time.perf_counter() - start, time.process_time() - start_cpu
    assert robot.flags == 0 and robot.t_s > 0.99 * SIM_S, "the benchmark robot must be released and driving"
    return SIM_S / elapsed, SIM_S / elapsed_cpu


def _plant_substep_us() -> float:
    """Plant alone, batched as the firmware runs it: 10 sub-steps per 10 ms command, the command changing each time."""
    robot = SimRobot(load_profile(PROFILE))
    plant = robot.plant
    batches = 20_000
    per_batch = round(PERIOD_S / SUBSTEP_S)
    start = time.perf_counter()
    for k in range(batches):
        plant.run(per_batch, SUBSTEP_S, 10.0 + (k & 1023) * 1e-3, 9.0)
    return (time.perf_counter() - start) / (batches * per_batch) * 1e6


def _wall_clock_serving() -> dict:
    """The serving loop of `diffdeck sim` (in a thread, memory link) for WALL_S: how closely sim time follows the wall
    clock, and the telemetry frames sent against the number due."""
    robot = SimRobot(load_profile(PROFILE))
    stop = threading.Event()
    thread = threading.Thread(target=run_wall_clock, args=(robot, stop))
    start = time.monotonic()
    thread.start()
    codec = Codec()
    lags = []
    frames = 0
    while time.monotonic() - start < WALL_S:
        time.sleep(0.05)
        lags.append(time.monotonic() - start - robot.t_s)
        frames += len(codec.feed(robot.console_end.read()))
    stop.set()
    thread.join()
    frames += len(codec.feed(robot.console_end.read()))
    frames_due = robot.t_s * robot.profile.sim.telemetry_rate_hz
    return {
        "wall_s": WALL_S,
        "sim_lag_p50_ms": round(1e3 * statistics.median(lags), 3),
        "sim_lag_max_ms": round(1e3 * max(lags), 3),
        "telemetry_frames_per_due": round(frames / frames_due, 3),
    }


def run() -> dict:
    _run_once(True)                     # warm-up (imports, caches), not counted
    alone, with_codec = [], []
    for _ in range(REPEATS):            # interleaved, so a change in machine load hits both alike
        alone.append(_run_once(False))
        with_codec.append(_run_once(True))
    robot_alone = statistics.median(wall for wall, _ in alone)
    return {
        "x_real_time": round(robot_alone, 1),
        "x_real_time_cpu": round(statistics.median(cpu for _, cpu in alone), 1),
        "x_real_time_with_console_codec": round(statistics.median(wall for wall, _ in with_codec), 1),
        "x_real_time_with_console_codec_cpu": round(statistics.median(cpu for _, cpu in with_codec), 1),
        "target_x_real_time": TARGET_X,
        "meets_target": robot_alone >= TARGET_X,
        "plant_substep_us": round(_plant_substep_us(), 3),
        "substep_s": SUBSTEP_S,
        "command_rate_hz": 1.0 / PERIOD_S,
        "simulated_s_per_run": SIM_S,
        "wall_clock_serving": _wall_clock_serving(),
        "load_average_1min": round(os.getloadavg()[0], 2),
        "cpus": os.cpu_count(),
    }
