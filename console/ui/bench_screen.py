"""The bench screen: a test program running in real time with its progress, the safety state and a live plot.

It drives a `BenchRun` (console/bench/run.py), whose loop runs in a child process, and only reads the progress and
the snapshots it gets back; the panels are the drive console's own (console/ui/widgets.py) with its stylesheet, so
both screens look and read alike, and the key line is rendered from the bindings (console/ui/keys.py). Space gives a
controlled stop, x a fast stop, q stops and quits; the recording is kept in every case.
"""

from __future__ import annotations

from typing import Any

from textual.app import App, ComposeResult
from textual.binding import Binding, BindingType
from textual.containers import Vertical
from textual.widgets import ProgressBar, Static

from console.bench.run import BenchResult, BenchRun
from console.core.safety import StopCause
from console.ui.keys import STOPPING, key_rows
from console.ui.signals import exit_on_ending_signals
from console.ui.widgets import EventLog, SafetyBanner, TracePlot
from shaping.shaper import StopKind

RENDER_HZ = 20.0
UI_TIMEOUT_S = 0.5
"""The loop brings the robot to a fast stop when the screen has not refreshed for this long (a stalled UI)."""


BENCH_BINDINGS: list[BindingType] = [
    Binding("space", "stop('controlled')", "stop", key_display="space", priority=True, group=STOPPING,
            tooltip="controlled stop: the program ends, both axes ramp down within the normal limits"),
    Binding("x", "stop('fast')", "fast stop", key_display="x", priority=True, group=STOPPING,
            tooltip="fast stop: ramp down with the profile's stop deceleration and stop jerk"),
    Binding("q,ctrl+c", "quit_bench", "stop, then quit", key_display="q", priority=True, group=STOPPING,
            tooltip="controlled stop; once at rest, q again quits (the recording is kept)"),
]
KEY_LINE = ("   ".join(f"{row.shown}: {row.short}" for row in key_rows(BENCH_BINDINGS))
            + "  |  a software stop is not a safety function: keep the hardware stop within reach")


class BenchApp(App[int]):
    """Runs one BenchRun on the wall clock; returns 0 when the program ran to its end, 130 when it was stopped."""

    CSS_PATH = "drive.tcss"
    CSS = """
    #bench-plot { height: 1fr; border: round #3d4757; padding: 0 1; }
    #bench-events { height: 7; border: round #3d4757; padding: 0 1; }
    #bench-keys { height: auto; background: #262d38; color: #c3cad4; }
    #program, #progress { height: 1; }
    Screen.-short #bench-plot { display: none; }
    Screen.-short #bench-events { height: 1fr; }
    """
    VERTICAL_BREAKPOINTS = [(0, "-short"), (30, "-tall")]
    """Below 30 rows the plot would get fewer than 6 rows per axis pair: the event log takes its place."""
    TITLE = "diffdeck bench"
    ENABLE_COMMAND_PALETTE = False
    BINDINGS = BENCH_BINDINGS

    def __init__(self, run: BenchRun) -> None:
        super().__init__()
        self.run_ = run
        self.result: BenchResult | None = None
        self._events_seen = 0
        self.ended_by: int | None = None       # SIGTERM / SIGHUP (console.ui.signals): finish() stops the robot

    def compose(self) -> ComposeResult:
        env = self.run_.profile.envelope
        with Vertical():
            yield SafetyBanner(id="banner")
            yield Static(id="program")
            yield ProgressBar(total=self.run_.bound.duration_s, show_eta=True, id="progress")
            yield TracePlot((-env.top_reverse_speed_mps, env.top_speed_mps), env.top_turn_rate_radps, span_s=10.0,
                            id="bench-plot")
            yield EventLog(id="bench-events")
            yield Static(KEY_LINE, id="bench-keys")

    def on_mount(self) -> None:
        exit_on_ending_signals(self)
        self.query_one(EventLog).add_note(0.0, f"recording to {self.run_.path}")
        self.run_.start()
        self.set_interval(1.0 / RENDER_HZ, self.tick)

    def tick(self) -> None:
        run = self.run_
        run.loop.ui_alive()
        snap = run.snapshot()
        progress = run.progress
        state = snap.state.value
        detail = {"armed": "the program is driving the motors", "stopping": "coming to rest",
                  "stopped": "at rest: the recording is kept", "disarmed": progress.phase.value}[state]
        self.query_one(SafetyBanner).show(state, snap.cause.value if snap.cause else None, detail)
        self.query_one("#program", Static).update(
            f"{run.program.name}: segment {progress.segment_index + 1}/{progress.segment_count} "
            f"{progress.segment_name}   {progress.t_s:5.1f} / {progress.duration_s:g} s")
        self.query_one(ProgressBar).update(progress=progress.t_s)
        shaped = snap.shaped
        nan = float("nan")
        v_meas = w_meas = nan
        if snap.left_meas_radps is not None and snap.right_meas_radps is not None:
            v_meas, w_meas = run.profile.geometry.to_body(snap.left_meas_radps, snap.right_meas_radps)
        self.query_one(TracePlot).add(snap.t_s, shaped.v_req_mps, shaped.v_mps, v_meas, shaped.omega_req_radps,
                                      shaped.omega_radps, w_meas)
        self.query_one(EventLog).add_loop(snap.events)
        if progress.done and self.result is None:
            self.result = run.close()
            self.query_one(EventLog).add_note(snap.t_s, f"program {progress.phase.value}; recording {run.path}; "
                                                        "press q to quit")

    def action_stop(self, kind: str) -> None:
        self.run_.loop.stop(StopKind(kind), StopCause.OPERATOR)

    def action_quit_bench(self) -> None:
        if not self.run_.progress.done:
            self.run_.stop()
            return                           # quit once at rest (the next q), so the stop is seen on screen
        self.exit(0 if self.result is not None and self.result.completed else 130)

    def finish(self, cause: StopCause = StopCause.OPERATOR) -> BenchResult:
        """After the app has exited: the run's result (stopping and closing it if the app did not get to)."""
        if self.result is None and not self.run_.progress.done:
            self.run_.stop(cause)
        return self.result if self.result is not None else self.run_.close()


def run_bench_screen(run: BenchRun) -> tuple[int, BenchResult]:
    """Show the bench screen until the operator quits (or SIGTERM / SIGHUP end it); the exit code and the result."""
    app = BenchApp(run)
    code: Any = app.run()
    result = app.finish(StopCause.SIGNAL if app.ended_by is not None else StopCause.OPERATOR)   # stops first
    return int(code if code is not None else 130), result

