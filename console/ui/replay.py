"""The replay screen: a recording shown in the drive screen's own panels, read-only, at the viewer's pace.

There is no link and no loop: nothing here can arm or move a robot. The position is a time in the recording; a
timer (<= 20 Hz) moves it on while playing (its speed x0.25 ... x8) and hands the row in force to the panels as a
Snapshot (console/replay.py builds it). Any jump (a step, an event, a typed time) rebuilds the trace plot and the top
view from the recording, so what is on screen at a time is the same however one got there.
The keys are this screen's own (REPLAY_BINDINGS); the hint bar, the key card and the help overlay are rendered from
them, as on the drive screen.
"""

from __future__ import annotations

import math
import time
from collections.abc import Callable

import numpy as np
from textual import events
from textual.app import App, ComposeResult
from textual.binding import Binding, BindingType
from textual.containers import Vertical
from textual.screen import ModalScreen, Screen
from textual.widgets import Input, Static

from console.core.step import Event, Snapshot
from console.files import PLAIN_NUMBER
from console.protocol import flag_names
from console.replay import RecordingError, Replay
from console.ui.app import HEAVY_PERIOD_S, RENDER_HZ, DriveApp
from console.ui.keys import key_rows
from console.ui.layout import PanelScreen
from console.ui.rows import Rows
from console.ui.screens import HelpScreen
from console.ui.signals import exit_on_ending_signals
from console.ui.widgets import (
    EventLog,
    HintBar,
    KeyCard,
    Panel,
    _col,
    _decoder_text,
)

SPEEDS = (0.25, 0.5, 1.0, 2.0, 4.0, 8.0)
TRAIL_S = 30.0
"""How much of the way before the position the top view draws after a jump (it keeps growing while playing)."""
TRAIL_STEP_M = 0.01
"""The top view's own spacing of trail points (console.ui.widgets.TopView.add)."""

PLAYING = Binding.Group("Playing")
MOVING = Binding.Group("Moving through the recording")
VIEW = Binding.Group("View")

REPLAY_BINDINGS: list[BindingType] = [
    Binding("p", "play_pause", "play/pause", key_display="p", group=PLAYING,
            tooltip="play from here, or hold still; at the end, play starts again from the beginning"),
    Binding("u", "speed(1)", "speed", key_display="u d", group=PLAYING,
            tooltip="faster / slower: x0.25, x0.5, x1, x2, x4, x8 of the recorded time"),
    Binding("d", "speed(-1)", "speed", key_display="u d", group=PLAYING),
    Binding("right", "step(1)", "period", key_display="←→", group=MOVING,
            tooltip="one control period (one recorded row) forward / back; holds still"),
    Binding("left", "step(-1)", "period", key_display="←→", group=MOVING),
    Binding("down", "jump('', 1)", "event", key_display="↑↓", group=MOVING,
            tooltip="to the next / previous event of any kind (the event log lists them)"),
    Binding("up", "jump('', -1)", "event", key_display="↑↓", group=MOVING),
    Binding("s", "jump('stop', 1)", "stop", key_display="s S", group=MOVING,
            tooltip="to the next / previous stop (■ on the position bar)"),
    Binding("S", "jump('stop', -1)", "stop", key_display="s S", group=MOVING),
    Binding("f", "jump('fault', 1)", "fault", key_display="f F", show=False, group=MOVING,
            tooltip="to the next / previous fault the robot reported (✕ on the position bar)"),
    Binding("F", "jump('fault', -1)", "fault", key_display="f F", show=False, group=MOVING),
    Binding("l", "jump('limit', 1)", "limit", key_display="l L", group=MOVING,
            tooltip="to the next / previous change of the binding limit"),
    Binding("L", "jump('limit', -1)", "limit", key_display="l L", group=MOVING),
    Binding("t", "goto", "go to", key_display="t", group=MOVING,
            tooltip="type a time in seconds and press enter to go there (escape: stay)"),
    Binding("home", "ends(0)", "start/end", key_display="hm end", show=False, group=MOVING,
            tooltip="to the first / last row"),
    Binding("end", "ends(1)", "start/end", key_display="hm end", show=False, group=MOVING),
    Binding("question_mark,f1", "help", "help", key_display="?", group=VIEW,
            tooltip="this help; escape or ? closes it"),
    Binding("q,ctrl+c", "quit_replay", "quit", key_display="q", priority=True, group=VIEW,
            tooltip="close the replay (nothing runs: there is no robot here)"),
]
REPLAY_KEYS = key_rows(REPLAY_BINDINGS)
REPLAY_NOTES = (
    "Replay reads a recording: there is no link and no robot, and nothing can be armed.",
    "The stop cause and the binding limit are the ones the loop recorded (l / L go to every change of that limit "
    "that held 0.25 s, acceleration and jerk limits too). What the rows do not hold is worked out from them and the "
    "profile: the envelope target (the profile's envelope applied to the recorded request), acceleration and jerk "
    "use (differences of the recorded output), the pose (dead reckoning when no true pose was recorded). With "
    "--profile, the limits shown are that profile's, not necessarily the ones the run was made with.",
    "Older recordings (without the cause and bound columns): a stop's cause is shown where the robot's flags at the "
    "stop name it (watchdog, fault, emergency stop), otherwise 'cause not recorded'; the binding limit is the "
    "profile's envelope applied to the recorded request.",
)


def _trail_points(poses: np.ndarray) -> np.ndarray:
    """The poses at least TRAIL_STEP_M of way apart (the top view keeps no closer points): a jump rebuilds the
    trail from a few hundred points instead of every row."""
    poses = poses[~np.isnan(poses[:, 0])]
    if poses.shape[0] < 2:
        return poses
    way = np.concatenate([[0.0], np.cumsum(np.hypot(np.diff(poses[:, 0]), np.diff(poses[:, 1])))])
    keep = np.flatnonzero(np.diff(np.floor(way / TRAIL_STEP_M), prepend=-1.0) > 0)
    return poses[keep]


class ReplayHints(HintBar):
    """The hint bar, from the replay's bindings."""

    def on_mount(self, event: events.Mount) -> None:  # type: ignore[override]  # the event, to stop the base
        event.prevent_default()          # the drive screen's own rows (HintBar.on_mount) are not this screen's
        self._update(tuple((row.shown, row.short) for row in REPLAY_KEYS if row.hint))


class ReplayKeyCard(KeyCard):
    """The key card, from the replay's bindings."""

    def on_mount(self, event: events.Mount) -> None:  # type: ignore[override]  # the event, to stop the base
        event.prevent_default()
        self._update(tuple((row.shown, row.short) for row in REPLAY_KEYS))


class ReplayTitle(Panel):
    """One line: what is replayed, where, how fast, and the last thing a key could not do."""

    def show(self, name: str, t_s: float, end_s: float, playing: bool, speed: float, profile: str,
             note: str, missing: int) -> None:
        self._update((name, round(t_s, 2), end_s, playing, speed, profile, note, missing))

    def paint(self, width: int, height: int) -> Rows:
        if self._shown is None:
            return Rows()
        name, t_s, end_s, playing, speed, profile, note, missing = self._shown
        text = Rows().append(" diffdeck replay ", "bold reverse").append("  ")
        text.append(f"{'▶ playing' if playing else '‖ paused'} x{speed:g}", "bold")
        text.append(f"  ·  t {t_s:.2f} / {end_s:.2f} s  ·  {name}")
        if missing:
            text.append(f"  ·  {missing} thing{'s' if missing > 1 else ''} missing (events at the start)", "bold")
        text.append(f"  ·  profile: {profile}")
        if note:
            text.append(f"  ·  {note}", "italic")
        return text


class PositionBar(Panel):
    """Where the position is in the whole recording, and where its stops (■) and faults (✕) are."""

    COMPONENT_CLASSES = {"position--stop", "position--fault", "position--now", "position--track"}

    def __init__(self, replay: Replay, *, id: str | None = None) -> None:
        super().__init__(id=id)
        self.replay = replay
        self.stops = replay.t[replay.kind_rows("stop")]
        self.faults = replay.t[replay.kind_rows("fault")]

    def show(self, t_s: float) -> None:
        self._update((t_s,))

    def paint(self, width: int, height: int) -> Rows:
        if self._shown is None or width < 20:
            return Rows()
        (t_s,) = self._shown
        start, end = self.replay.start_s, self.replay.end_s
        lo, hi = start, max(end, start + 1e-9)
        cells = ["─"] * width
        styles = ["position--track"] * width
        for times, glyph, style in ((self.stops, "■", "position--stop"), (self.faults, "✕", "position--fault")):
            for t in times.tolist():
                c = _col(t, lo, hi, width)
                cells[c], styles[c] = glyph, style
        now = _col(t_s, lo, hi, width)
        text = Rows()
        run_start = 0
        for c in range(1, width + 1):
            if c == width or styles[c] != styles[run_start] or c == now or c - 1 == now:
                run_style = self.style_of(styles[run_start])
                if run_start == now:
                    run_style += self.style_of("position--now")
                text.append("".join(cells[run_start:c]), run_style)
                run_start = c
        text.newline()
        left, right = f"{start:.1f} s", f"{end:.1f} s"
        legend = "■ stop  ✕ fault  ▲ here"
        line = [" "] * width
        # the legend sits on the half the position marker is not on, so neither hides the other
        legend_at = width - len(right) - len(legend) - 2 if now < width // 2 else len(left) + 2
        for at, word in ((0, left), (width - len(right), right), (legend_at, legend)):
            for k, char in enumerate(word):
                if 0 <= at + k < width:
                    line[at + k] = char
        text.append("".join(line[:now]), "dim").append("▲", self.style_of("position--now"))
        text.append("".join(line[now + 1:]), "dim")
        return text


class RecordedLink(Panel):
    """What the recording says about the link: per row the flags and the row rate; the end-of-run counters from the
    sidecar, marked as such (the rows do not hold them)."""

    def __init__(self, replay: Replay, *, id: str | None = None) -> None:
        super().__init__(id=id)
        self.replay = replay

    def show(self, snap: Snapshot) -> None:
        self._update((snap.link.url, round(snap.link.rate_hz), snap.flags, snap.left_meas_radps is not None))

    def paint(self, width: int, height: int) -> Rows:
        if self._shown is None:
            return Rows()
        url, rate, flags, measured = self._shown
        replay = self.replay
        side = replay.sidecar
        end_link = side.link if side is not None else None
        loop = side.loop if side is not None else None
        rows = [
            ("url", url),
            ("rows", f"{rate} per s (set {replay.profile.link.rate_hz:g} Hz)"),
            ("telemetry", "measured rates recorded" if measured else "none yet"),
            ("flags", (" ".join(flag_names(flags)) or "none") if replay.flags is not None else "not recorded"),
            ("at the end", "(from the sidecar)" if side is not None else "no sidecar"),
        ]
        if end_link is not None:
            rows += [("errors", _decoder_text(end_link.decoder)),
                     ("frames", f"tx {end_link.frames_sent} rx {end_link.telemetry_received}")]
        if loop is not None:
            rows += [("loop late", f"p99 {loop.period_error_p99_s * 1e3:.2f} max {loop.period_error_max_s * 1e3:.2f} "
                                   "ms"),
                     ("missed", f"{loop.overruns} periods")]
        text = Rows()
        for i, (name, value) in enumerate(rows):
            text.append(f"{name:<11}", "dim")
            text.append(value + ("\n" if i < len(rows) - 1 else ""))
        return text


class RecordedEvents(EventLog):
    """The event log showing the recording's events up to the position (a jump back shows fewer)."""

    _events: tuple[Event, ...] | None = None

    def show_events(self, events: tuple[Event, ...]) -> None:
        if events == self._events:
            return
        self._events = events
        self.lines.clear()
        self._last_loop_event = None
        self.add_loop(events)
        self._count += 1
        self._update((self._count,))


class GotoScreen(ModalScreen[float | None]):
    """One line to type a time into; enter goes there, escape stays."""

    BINDINGS = [Binding("escape", "dismiss_none", "stay")]

    def __init__(self, start_s: float, end_s: float) -> None:
        super().__init__(id="goto")
        self.start_s, self.end_s = start_s, end_s

    def compose(self) -> ComposeResult:
        with Vertical(id="goto-box") as box:
            box.border_title = f"go to a time, {self.start_s:.2f} to {self.end_s:.2f} s"
            box.border_subtitle = "enter: go · escape: stay"
            yield Input(placeholder="seconds, e.g. 12.4", id="goto-input", select_on_focus=False)
            yield Static("", id="goto-problem")

    def on_input_submitted(self, event: Input.Submitted) -> None:
        text = event.value.strip()
        value = float(text) if PLAIN_NUMBER.fullmatch(text) else math.nan
        if not self.start_s <= value <= self.end_s:
            self.query_one("#goto-problem", Static).update(
                f"{text!r} is not a time from {self.start_s:.2f} to {self.end_s:.2f} s")
            return
        self.dismiss(value)

    def action_dismiss_none(self) -> None:
        self.dismiss(None)


class ReplayScreen(PanelScreen):
    """The drive screen's panels over one recording; every key is a way through the recording."""

    BINDINGS = REPLAY_BINDINGS

    def __init__(self, replay: Replay) -> None:
        super().__init__(id="replay")
        self.replay = replay
        self.ready = False
        self._row = -1                      # the row on screen (-1: none yet)
        self._heavy_t_s = -math.inf

    def compose(self) -> ComposeResult:
        yield from self.drive_layout(self.replay.profile, title=ReplayTitle(id="title"),
                                     left=(RecordedLink(self.replay, id="link"),), keys=ReplayKeyCard(id="keys"),
                                     events=RecordedEvents(id="events"),
                                     below=(PositionBar(self.replay, id="position"), ReplayHints(id="hints")))

    def on_mount(self) -> None:
        self.find_panels(self.replay.profile, link_title="link (recorded)", events_title="events (recorded)")
        self.title_bar = self.query_one(ReplayTitle)
        self.link_panel = self.query_one(RecordedLink)
        self.event_log = self.query_one(RecordedEvents)
        self.position = self.query_one(PositionBar)
        self.top_view.source = self.top_view.border_subtitle = (
            "true pose (sim)" if self.replay.true_pose else "dead reckoning")
        self.ready = True
        app = self.app
        assert isinstance(app, ReplayApp)
        app.start_ticking()

    def show(self, row: int, playing: bool, speed: float, note: str) -> Snapshot:
        """Row `row` on every panel (only the panels whose values changed repaint)."""
        replay = self.replay
        snap = replay.snapshot(row)
        envelope, s = replay.profile.envelope, snap.shaped
        self.title_bar.show(replay.name, snap.t_s, replay.end_s, playing, speed, replay.profile_source, note,
                            len(replay.missing))
        cause = None if snap.cause is None else snap.cause.value
        self.banner.show(snap.state.value, cause, f"REPLAY {replay.name} · read-only")
        self.link_panel.show(snap)
        self.limit_panel.show(snap)
        meas_v = meas_w = None
        if snap.left_meas_radps is not None and snap.right_meas_radps is not None:
            meas_v, meas_w = replay.profile.geometry.to_body(snap.left_meas_radps, snap.right_meas_radps)
        reverse_bound, forward_bound = envelope.speed_bounds_at(s.omega_radps)
        self.speed_gauge.show(s.v_req_mps, s.v_target_mps, s.v_mps, meas_v, -reverse_bound, forward_bound)
        turn_bound = envelope.max_turn_rate_at(s.v_mps)
        self.turn_gauge.show(s.omega_req_radps, s.omega_target_radps, s.omega_radps, meas_w, -turn_bound, turn_bound)
        self.wheel_panel.show(snap)
        self._views(row, repaint=not playing or snap.t_s - self._heavy_t_s >= HEAVY_PERIOD_S)
        self.event_log.show_events(snap.events)
        self.position.show(snap.t_s)
        return snap

    def _views(self, row: int, repaint: bool) -> None:
        """The trace and the top view: the rows since the last one shown, or rebuilt after a jump."""
        replay, plot, top = self.replay, self.plot, self.top_view
        t = replay.t
        window_start = int(np.searchsorted(t, t[row] - plot.span_s - 0.5, side="left"))
        if row <= self._row or self._row < window_start:
            plot.samples.clear()
            top.trail.clear()
            top.pose = None
            first, trail_first = window_start, int(np.searchsorted(t, t[row] - TRAIL_S, side="left"))
            repaint = True
        else:
            first = trail_first = self._row + 1
        if repaint:
            self._heavy_t_s = float(t[row])
        speed, turn = replay.measured_body(first, row)
        columns = [replay.source.column(name, first, row).tolist()
                   for name in ("v_req_mps", "v_mps", "omega_req_radps", "omega_radps")]
        for k, sample in enumerate(zip(t[first:row + 1].tolist(), columns[0], columns[1], speed.tolist(), columns[2],
                                       columns[3], turn.tolist()), start=first):
            plot.add(*sample, repaint=repaint and k == row)
        for x, y, heading in _trail_points(replay.poses(trail_first, row)).tolist():
            top.add((x, y, heading), top.source, repaint=False)
        x, y, heading = replay.poses(row, row)[0].tolist()
        if not math.isnan(x):
            top.add((x, y, heading), top.source, repaint=repaint)
        self._row = row

    # ---- every key goes to the app, which alone holds the position
    def action_play_pause(self) -> None:
        self.console.play_pause()

    def action_speed(self, direction: int) -> None:
        self.console.change_speed(direction)

    def action_step(self, rows: int) -> None:
        self.console.step(rows)

    def action_jump(self, kind: str, direction: int) -> None:
        self.console.jump(kind or None, direction)

    def action_ends(self, end: int) -> None:
        self.console.seek_row(self.replay.rows - 1 if end else 0)

    def action_goto(self) -> None:
        self.app.push_screen(GotoScreen(self.replay.start_s, self.replay.end_s), self.console.goto_typed)

    def action_help(self) -> None:
        self.app.push_screen(HelpScreen(0.0, REPLAY_KEYS, REPLAY_NOTES))

    @property
    def console(self) -> ReplayApp:
        app = self.app
        assert isinstance(app, ReplayApp)
        return app


class ReplayApp(App[int]):
    """Holds the position (a time in the recording), plays it on a timer, and moves it on the viewer's keys.

    `clock` (seconds, monotonic) paces playing; tests hand in their own and call `tick()` themselves.
    """

    CSS_PATH = ["drive.tcss", "replay.tcss"]
    TITLE = "diffdeck replay"
    HORIZONTAL_BREAKPOINTS = DriveApp.HORIZONTAL_BREAKPOINTS
    VERTICAL_BREAKPOINTS = DriveApp.VERTICAL_BREAKPOINTS
    ENABLE_COMMAND_PALETTE = False
    BINDINGS = [Binding("q,ctrl+c", "quit_replay", "quit", priority=True)]

    def __init__(self, replay: Replay, *, at_s: float | None = None, render_hz: float = RENDER_HZ,
                 clock: Callable[[], float] = time.monotonic) -> None:
        super().__init__()
        self.replay = replay
        self.render_hz = min(render_hz, RENDER_HZ)
        self.clock = clock
        self.t_s = replay.start_s if at_s is None else min(max(at_s, replay.start_s), replay.end_s)
        self.row = replay.row_at(self.t_s)
        self.playing = False
        self.speed = 1.0
        self.note = ""
        self.last_snapshot: Snapshot | None = None
        self._wall: float | None = None
        self.ended_by: int | None = None      # SIGTERM / SIGHUP (console.ui.signals)
        self.error: RecordingError | None = None

    def on_mount(self) -> None:
        exit_on_ending_signals(self)

    def get_default_screen(self) -> Screen[None]:
        return ReplayScreen(self.replay)

    @property
    def replay_screen(self) -> ReplayScreen:
        screen = self.screen_stack[0]
        assert isinstance(screen, ReplayScreen)
        return screen

    def start_ticking(self) -> None:
        self.tick()
        self.set_interval(1.0 / self.render_hz, self.tick)

    def tick(self) -> None:
        """Move the position on by the time passed x the speed while playing; show the row in force."""
        if self.playing:
            now = self.clock()
            if self._wall is not None:
                self.t_s = min(self.t_s + (now - self._wall) * self.speed, self.replay.end_s)
            self._wall = now
            self.row = self.replay.row_at(self.t_s)
            if self.row == self.replay.rows - 1:
                self.playing = False
                self.note = "the end of the recording"
        self._show()

    def _show(self) -> None:
        if not self.replay_screen.ready:
            return
        try:
            self.last_snapshot = self.replay_screen.show(self.row, self.playing, self.speed, self.note)
        except RecordingError as error:     # a bad cell in rows shown for the first time: the verb says it
            self.error = error
            self.exit(2)

    def seek_row(self, row: int, note: str = "") -> None:
        """Put the position on a row (clipped to the recording) and show it at once."""
        self.row = min(max(row, 0), self.replay.rows - 1)
        self.t_s = float(self.replay.t[self.row])
        self._wall = None if not self.playing else self.clock()
        self.note = note
        self._show()

    def seek_time(self, t_s: float) -> None:
        self.seek_row(self.replay.row_at(t_s))

    # ---- keys
    def play_pause(self) -> None:
        if not self.playing and self.row == self.replay.rows - 1:
            self.seek_row(0)
        self.playing = not self.playing
        self._wall = self.clock() if self.playing else None
        self.note = ""
        self._show()

    def change_speed(self, direction: int) -> None:
        i = SPEEDS.index(self.speed) + direction
        self.speed = SPEEDS[min(max(i, 0), len(SPEEDS) - 1)]
        limit = "top" if direction > 0 else "least"
        self.note = "" if 0 <= i < len(SPEEDS) else f"x{self.speed:g} is the {limit} speed"
        if self.playing:
            self.tick()             # the time so far at the old speed, from now at the new one
        else:
            self._show()

    def step(self, rows: int) -> None:
        self.playing = False
        target = self.row + rows
        note = "" if 0 <= target < self.replay.rows else ("the first row" if target < 0 else "the last row")
        self.seek_row(target, note)

    def jump(self, kind: str | None, direction: int) -> None:
        row = self.replay.next_mark(self.row, kind, back=direction < 0)
        what = {None: "event", "stop": "stop", "fault": "fault", "limit": "binding-limit change"}[kind]
        if row is None:
            self.note = f"no {'later' if direction > 0 else 'earlier'} {what}"
            self._show()
            return
        self.seek_row(row)

    def goto_typed(self, t_s: float | None) -> None:
        if t_s is not None:
            self.seek_time(t_s)

    def action_quit_replay(self) -> None:
        self.exit(0)
