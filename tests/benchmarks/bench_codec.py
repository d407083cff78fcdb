"""Codec speed: frames per second through encode plus decode (target >= 100,000 frames/s combined).

Each frame is encoded, then fed to the decoder on its own, as the control loop sees them (one read per cycle holds
about one frame), which is slower than decoding one large buffer. Figures are medians of several runs.
"""

from __future__ import annotations

import statistics
import time

from console.protocol import Decoder, Flags, Heartbeat, StopCommand, Telemetry, WheelCommand, encode

RUNS = 7
FRAMES = 20_000


def _mix(n: int) -> list:
    """What a session carries: wheel commands and telemetry in turn, now and then a heartbeat or a stop."""
    out = []
    for i in range(n):
        seq = i % 65536
        if i % 2 == 0:
            out.append(WheelCommand(seq, 12.345 + i % 100 * 0.01, -3.21 - i % 50 * 0.02))
        elif i % 50 == 1:
            out.append(Heartbeat(seq) if i % 100 == 1 else StopCommand(seq, 2))
        else:
            out.append(Telemetry(seq, (seq - 1) % 65536, 12.3, -3.2, 100_000 + i, -40_000 - i, 24.05,
                                 int(Flags.SATURATED)))
    return out


def _rate(frames: list) -> float:
    """frames / (time to encode them all + time to decode them one by one)."""
    t0 = time.perf_counter()
    lines = [encode(f) for f in frames]
    t1 = time.perf_counter()
    decoder = Decoder()
    feed = decoder.feed
    decoded = 0
    for line in lines:
        decoded += len(feed(line))
    t2 = time.perf_counter()
    assert decoded == len(frames)
    return len(frames) / (t2 - t0)


def run() -> dict:
    mix = _mix(FRAMES)
    telemetry = [f for f in _mix(FRAMES * 2) if isinstance(f, Telemetry)][:FRAMES]
    mixed = statistics.median(_rate(mix) for _ in range(RUNS))
    worst = statistics.median(_rate(telemetry) for _ in range(RUNS))
    return {
        "encode_decode_frames_per_s_mixed": round(mixed),
        "encode_decode_frames_per_s_telemetry_only": round(worst),
        "target_frames_per_s": 100_000,
        "target_met": min(mixed, worst) >= 100_000,
        "runs": RUNS,
        "frames_per_run": FRAMES,
    }
