"""Figures shared by the benchmark modules (not a benchmark itself: the runner only runs `bench_*`)."""

from __future__ import annotations

from console.core.step import LoopStats


def loop_timing(stats: LoopStats) -> dict[str, float | int]:
    """The control loop's own timing figures, in ms."""
    return {
        "cycles": stats.cycles,
        "missed_periods": stats.overruns,
        "period_error_p50_ms": round(stats.period_error_p50_s * 1e3, 4),
        "period_error_p99_ms": round(stats.period_error_p99_s * 1e3, 4),
        "period_error_max_ms": round(stats.period_error_max_s * 1e3, 4),
        "work_p99_ms": round(stats.work_p99_s * 1e3, 4),
    }
