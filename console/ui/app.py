"""The drive console: one screen of panels fed from the control loop's snapshots, and the operator's keys.

Threads: the loop runs on its own thread; this app runs Textual's event loop and only ever calls
`loop.request / arm / stop / operator_alive / ui_alive / snapshot`. A timer (<= 30 Hz) pulls the newest snapshot,
refreshes the panels and beats the UI heartbeat, so a stalled screen makes the loop stop the robot.
Stop keys are App-level priority bindings: they act in every state and above every overlay.
"""

from __future__ import annotations

import asyncio
import math
import signal
from collections.abc import Callable
from types import FrameType
from typing import TYPE_CHECKING

from textual.app import App, ComposeResult
from textual.screen import Screen

from console.core.safety import SafetyState, StopCause
from console.links import is_simulated
from console.session import at_rest
from console.ui.driving import Confirm, DriveInput, DriveMode, DriveSettings
from console.ui.input_panel import InputPanel
from console.ui.keys import APP_BINDINGS, SCREEN_BINDINGS
from console.ui.layout import PanelScreen
from console.ui.monitor import MonitorScreen
from console.ui.screens import CautionScreen, HelpScreen, Overlay, SetpointScreen
from console.ui.signals import exit_on_ending_signals
from console.ui.widgets import (
    EventLog,
    HintBar,
    KeyCard,
    LinkPanel,
    TitleBar,
)
from shaping.shaper import StopKind

if TYPE_CHECKING:
    from console.core.step import Snapshot
    from console.loop import Clock, ControlLoop
    from console.loop_process import LoopProcess
    from console.profile import Profile

RENDER_HZ_MAX = 30.0
RENDER_HZ = 12.5
"""Screen refreshes per second: numbers a person can read move smoothly, and the CPU is left to the loop (the
renders are most of the console's own CPU: 20 per second cost about a third more for no reading gained)."""
BEAT_HZ = 20.0
"""Heartbeats and the hold release are checked this often, whatever the screen's rate: a released key must not wait
for the next repaint."""
HEAVY_PERIOD_S = 0.2
"""The plot and the top view (the biggest panels) repaint at most every 1/8 s of loop time: that scrolls smoothly
enough and keeps the whole console within its CPU budget; their samples are still taken on every tick. Loop time,
not ticks, decides, so a run on the virtual clock draws the same frames every time."""


AT_REST_RADPS = 0.3
"""Measured wheel rates below this count as wheels at rest: above the spread of measured rates at standstill (the
demo robots' simulated measurement noise is 0.05-0.08 rad/s standard deviation, so 3 sigma stays under it); common
practice, no standard value."""


def _wheels_word(snap: Snapshot) -> str:
    """What fresh telemetry says about the wheels: at rest, still turning, or not known."""
    left, right = snap.left_meas_radps, snap.right_meas_radps
    if left is None or right is None or snap.link.lost is not None:
        return "wheel motion unknown"
    return "at rest" if max(abs(left), abs(right)) < AT_REST_RADPS else "wheels still turning"


def repaint_on_resume(app: DriveApp) -> Callable[[], None]:
    """SIGCONT (resumed after a job-control stop): the whole screen is drawn again, as the shell may have written
    over it. Textual's own SIGCONT handler (it restores the terminal modes) runs first. Returns the undo."""
    loop = asyncio.get_running_loop()
    previous = signal.getsignal(signal.SIGCONT)

    def on_cont(signum: int, frame: FrameType | None) -> None:
        if callable(previous):
            previous(signum, frame)
        loop.call_soon_threadsafe(app.repaint_all)

    def restore() -> None:
        signal.signal(signal.SIGCONT, previous)

    signal.signal(signal.SIGCONT, on_cont)
    return restore


class DriveScreen(PanelScreen):
    """The main screen. Driving keys live here, so they are dead while an overlay is open; stops are on the app."""

    BINDINGS = SCREEN_BINDINGS

    def __init__(self, profile: Profile) -> None:
        super().__init__(id="drive")
        self.profile = profile
        self._heavy_t_s = -math.inf
        self.ready = False

    @property
    def console(self) -> DriveApp:
        app = self.app
        assert isinstance(app, DriveApp)
        return app

    def compose(self) -> ComposeResult:
        yield from self.drive_layout(self.profile, title=TitleBar(id="title"),
                                     left=(InputPanel(id="input"), LinkPanel(id="link")), keys=KeyCard(id="keys"),
                                     events=EventLog(id="events"), below=(HintBar(id="hints"),))

    def on_mount(self) -> None:
        self.find_panels(self.profile, link_title="link", events_title="events")
        self.title_bar = self.query_one(TitleBar)
        self.input_panel = self.query_one(InputPanel)
        self.link_panel = self.query_one(LinkPanel)
        self.event_log = self.query_one(EventLog)
        self.ready = True
        self.console.start_ticking()

    def show(self, snap: Snapshot, drive: DriveInput, now_s: float) -> None:
        """Hand the snapshot to every panel; each repaints only if what it shows changed."""
        profile, s = self.profile, snap.shaped
        geometry, envelope = profile.geometry, profile.envelope
        self.title_bar.show(
            profile.name, snap.link.url, drive.mode.value,
            f"{drive.speed_step_mps:.3g} m/s · {drive.turn_step_radps:.3g} rad/s", snap.t_s,
        )
        self.banner.show(*self.banner_words(snap, drive, now_s))
        self.input_panel.show(snap.source)
        self.link_panel.show(snap, profile.link.rate_hz)
        self.limit_panel.show(snap)
        age = snap.link.telemetry_age_s
        stale = None if snap.link.lost is None or age is None else int(age)   # the last values, dimmed, with age
        meas_v = meas_w = None
        if snap.left_meas_radps is not None and snap.right_meas_radps is not None:
            meas_v, meas_w = geometry.to_body(snap.left_meas_radps, snap.right_meas_radps)
        reverse_bound, forward_bound = envelope.speed_bounds_at(s.omega_radps)
        self.speed_gauge.show(s.v_req_mps, s.v_target_mps, s.v_mps, meas_v, -reverse_bound, forward_bound, stale)
        turn_bound = envelope.max_turn_rate_at(s.v_mps)
        self.turn_gauge.show(
            s.omega_req_radps, s.omega_target_radps, s.omega_radps, meas_w, -turn_bound, turn_bound, stale
        )
        self.wheel_panel.show(snap, stale)
        nan = math.nan
        repaint = snap.t_s - self._heavy_t_s >= HEAVY_PERIOD_S
        if repaint:
            self._heavy_t_s = snap.t_s
        self.plot.add(
            snap.t_s, s.v_req_mps, s.v_mps, nan if meas_v is None else meas_v,
            s.omega_req_radps, s.omega_radps, nan if meas_w is None else meas_w, repaint=repaint,
        )
        self.top_view.add(snap.pose, "true pose (sim)" if is_simulated(snap.link.url) else "dead reckoning",
                          repaint=repaint)
        self.event_log.add_loop(snap.events)

    def banner_words(self, snap: Snapshot, drive: DriveInput, now_s: float) -> tuple[str, str | None, str]:
        """(state, cause, detail): what the banner says, here and on every overlay's state strip."""
        detail = self._banner_detail(snap, drive, now_s)
        if self.console.quitting:
            detail = "stopping … quits at rest\nq again: fast stop, quit now"
        return snap.state.value, None if snap.cause is None else snap.cause.value, detail

    @staticmethod
    def _banner_detail(snap: Snapshot, drive: DriveInput, now_s: float) -> str:
        """Only what is known: the robot's state needs live telemetry; the arming hint only when arming would work."""
        state, refusal = snap.state, snap.arm_refusal
        if snap.link.lost is not None:
            if drive.window_pending(Confirm.RECONNECT, now_s):
                return "link lost · press ENTER now to reopen it"
            return "link lost, robot state unknown\nreconnect: r, enter"
        armable = state in (SafetyState.DISARMED, SafetyState.STOPPED)
        if refusal is None and armable and drive.window_pending(Confirm.ARM, now_s):
            return "press ENTER now to arm"
        arming = f"cannot arm: {refusal}" if refusal is not None else \
            ("re-arm: a, enter" if state is SafetyState.STOPPED else "arm: a, enter")
        if state is SafetyState.DISARMED:
            return f"no motion · {arming}"
        if state is SafetyState.STOPPED:
            return f"{_wheels_word(snap)} · {arming}"
        if state is SafetyState.STOPPING:
            kind = snap.shaped.stopping
            if kind is StopKind.CONTROLLED:
                return "ramping down · x: faster"
            return "fast stop: ramping down" if kind is StopKind.FAST else "stopping"
        if snap.source is not None:     # drive --input: what the device's holder must do, not the terminal's keys
            return snap.source.detail
        hold = drive.hold_left_s(now_s)
        if drive.mode is DriveMode.HOLD:
            return "HOLD: keep a key down" if hold is None else f"HOLD: lapses in {hold:.1f} s"
        left = drive.keepalive_left_s(now_s)
        return f"LATCHED · k in {max(left, 0.0):.0f} s or it stops"

    def note(self, t_s: float, text: str) -> None:
        if self.ready:
            self.event_log.add_note(t_s, text)

    # ---- actions: every one goes through the app, which alone talks to the loop
    def action_arm_open(self) -> None:
        self.console.arm_open()

    def action_arm_confirm(self) -> None:
        self.console.arm_confirm()

    def action_nudge(self, speed_steps: int, turn_steps: int) -> None:
        self.console.drive_key(f"nudge {speed_steps:+d} {turn_steps:+d}",
                               lambda d, now: d.nudge(speed_steps, turn_steps, now))

    def action_preset(self, tenths: int) -> None:
        self.console.drive_key(f"preset {tenths}", lambda d, now: d.preset(tenths / 10.0, now))

    def action_zero(self, which: str) -> None:
        changes: dict[str, Callable[[DriveInput, float], object]] = {
            "speed": lambda d, now: d.zero_speed(now),
            "turn": lambda d, now: d.centre_turn(now),
            "both": lambda d, now: (d.zero_speed(now), d.centre_turn(now)),
        }
        self.console.drive_key(f"zero {which}", changes[which])

    def action_steps(self, coarser: bool) -> None:
        self.console.scale_steps(coarser)

    def action_toggle_mode(self) -> None:
        self.console.toggle_mode()

    def action_reconnect_open(self) -> None:
        self.console.reconnect_open()

    def action_keepalive(self) -> None:
        self.console.keepalive()

    def action_help(self) -> None:
        self.app.push_screen(HelpScreen(self.console.drive.deadman_s))

    def action_setpoint(self) -> None:
        self.console.setpoint_open()

    def action_monitor(self) -> None:
        self.console.monitor_open()


class DriveApp(App[int]):
    """The console. `tick()` is the only place snapshots are read; key actions are the only places requests are sent."""

    CSS_PATH = "drive.tcss"
    TITLE = "diffdeck drive"
    HORIZONTAL_BREAKPOINTS = [(0, "-narrow"), (100, "-wide")]
    VERTICAL_BREAKPOINTS = [(0, "-short"), (34, "-mid"), (40, "-tall")]
    ENABLE_COMMAND_PALETTE = False
    BINDINGS = APP_BINDINGS

    def __init__(self, loop: ControlLoop | LoopProcess, profile: Profile, clock: Clock, settings: DriveSettings, *,
                 real_link: bool, render_hz: float = RENDER_HZ,
                 on_ready: Callable[[], None] | None = None,
                 on_ending_signal: Callable[[int], None] | None = None) -> None:
        super().__init__()
        self.loop = loop
        self.profile = profile
        self.clock = clock
        self.drive = DriveInput(profile.envelope, settings)
        self.real_link = real_link
        self.render_hz = min(render_hz, RENDER_HZ_MAX)
        self.on_ready = on_ready
        self.on_ending_signal = on_ending_signal
        self.confirmed = not real_link
        self.last_snapshot: Snapshot | None = None
        self.quitting = False                  # q while moving: the console closes once the robot is at rest
        self.ended_by: int | None = None       # SIGTERM / SIGHUP (console.ui.signals): the verb stops the robot

    def on_mount(self) -> None:
        exit_on_ending_signals(self, self.on_ending_signal)
        self._restore_sigcont = repaint_on_resume(self)
        self.app_resume_signal.subscribe(self, lambda _app: self.repaint_all())

    def on_unmount(self) -> None:
        self._restore_sigcont()

    def repaint_all(self) -> None:
        """Every cell drawn again (after a job-control stop the terminal may hold the shell's text)."""
        self.screen.refresh(layout=True)
        for screen in self._background_screens:
            screen.refresh()

    def get_default_screen(self) -> Screen[None]:
        return DriveScreen(self.profile)

    @property
    def drive_screen(self) -> DriveScreen:
        screen = self.screen_stack[0]
        assert isinstance(screen, DriveScreen)
        return screen

    def start_ticking(self) -> None:
        """Called once the drive screen is composed: first frame now, then the refresh timer.

        `on_ready` (the verb passes `loop.start`) runs only now, so the loop thread does not compete with Textual's
        start-up work (imports, CSS) for the interpreter and its first periods keep their deadlines.
        """
        if self.on_ready is not None:
            self.on_ready()
        self.tick()
        self.set_interval(1.0 / self.render_hz, self.tick)
        self.set_interval(1.0 / max(BEAT_HZ, self.render_hz), self.beat)
        if self.real_link:
            self.push_screen(
                CautionScreen(self.profile.link.url, self.profile.link.watchdog_s, self.drive.deadman_s),
                self._cautions_read,
            )

    def _cautions_read(self, confirmed: bool | None) -> None:
        self.confirmed = bool(confirmed)
        self._note("cautions confirmed by the operator")

    # ---- the beat (heartbeats, hold release) and the refresh tick (snapshot in, panels out)
    def beat(self) -> None:
        """Cheap and frequent: the heartbeats and the hold release, no repaint."""
        self.loop.ui_alive()
        now = self.clock.now()
        if self.drive.mode is DriveMode.HOLD:
            self.loop.operator_alive()   # hold mode's own deadman zeroes an unattended request: no keep-alive asked
        held_for = self.drive.held_for_s(now)
        if self.drive.expire(now):
            self.loop.request(0.0, 0.0)
            self._note(f"hold released: no driving key for {held_for:.2f} s, request to zero")

    def tick(self) -> None:
        self.beat()
        now = self.clock.now()
        snap = self.loop.snapshot()
        if self.quitting and at_rest(self.loop):
            self.exit(0)
        if snap.state is not SafetyState.ARMED and self.drive.request != (0.0, 0.0):
            self.drive.clear()   # the loop stopped on its own (link, deadman, fault): nothing may stay requested
        self.last_snapshot = snap
        if self.drive_screen.ready:
            self.drive_screen.show(snap, self.drive, now)
            if isinstance(self.screen, Overlay):
                self.screen.show_state(*self.drive_screen.banner_words(snap, self.drive, now))
            if isinstance(self.screen, MonitorScreen):
                self.screen.pull(self.loop)

    def _note(self, text: str) -> None:
        t_s = self.last_snapshot.t_s if self.last_snapshot is not None else 0.0
        self.drive_screen.note(t_s, text)

    def _key(self) -> None:
        self.loop.operator_alive()
        self.drive.present(self.clock.now())

    # ---- operator actions
    def action_stop(self, kind: str) -> None:
        self._key()
        self.drive.clear()
        self.drive.cancel_window()
        self.loop.stop(StopKind(kind), StopCause.OPERATOR)

    def action_quit_console(self) -> None:
        """At rest: quit now. Moving: a controlled stop, "stopping ..." until at rest, then quit; q again while
        stopping: a fast stop and quit now (the verb still waits for rest before it closes the loop)."""
        self._key()
        self.drive.clear()
        self.drive.cancel_window()
        if self.quitting:
            self.loop.stop(StopKind.FAST, StopCause.OPERATOR)     # (a program end's stop is always controlled)
            self.exit(0)
            return
        self.loop.stop(StopKind.CONTROLLED, StopCause.PROGRAM_END)
        if at_rest(self.loop):
            self.exit(0)
            return
        self.quitting = True
        self._note("quit: stopping first; q again: fast stop and quit now")
        self.tick()

    def arm_open(self) -> None:
        self._key()
        if not self.confirmed:
            return
        snap = self.last_snapshot
        if self.quitting:
            self._note("quitting: no arming")
            return
        if snap is not None and snap.state is SafetyState.ARMED:
            self._note("already armed")
            return
        self.drive.open_window(Confirm.ARM, self.clock.now())
        self._note(f"arming: press enter within {self.drive.arm_window_s:g} s")
        self.tick()

    def reconnect_open(self) -> None:
        self._key()
        snap = self.last_snapshot
        if snap is None or snap.link.lost is None:
            self._note("the link is up: nothing to reconnect")
            return
        self.drive.open_window(Confirm.RECONNECT, self.clock.now())
        self._note(f"reconnect {snap.link.url}: press enter within {self.drive.arm_window_s:g} s")
        self.tick()

    def arm_confirm(self) -> None:
        if self.drive.confirm(Confirm.RECONNECT, self.clock.now()):
            self._key()
            self.loop.reconnect()
            self._note("reopening the link; arm again once telemetry is back")
            return
        self._key()
        if not self.drive.confirm(Confirm.ARM, self.clock.now()):
            self._note("enter arms only right after a")
            return
        self.drive.clear()
        self.loop.request(0.0, 0.0)
        self.loop.arm()
        self.tick()

    def drive_key(self, name: str, change: Callable[[DriveInput, float], object]) -> None:
        """A driving key: only when armed; sends the new request at once (not at the next tick)."""
        self._key()
        snap = self.last_snapshot
        if snap is None or snap.state is not SafetyState.ARMED:
            self._note("not armed: a then enter arms")
            return
        if snap.source is not None:     # drive --input: the device alone drives (the input panel says so)
            return
        now = self.clock.now()
        before = self.drive.request
        self.drive.key(name, now)
        change(self.drive, now)
        if self.drive.request != before:
            self.loop.request(*self.drive.request)

    def keepalive(self) -> None:
        self._key()

    def monitor_open(self) -> None:
        self._key()
        self.push_screen(MonitorScreen(self.profile.link))

    def setpoint_open(self) -> None:
        """Typed setpoints hold only in latched mode (hold mode would let them lapse at once) and only armed."""
        self._key()
        snap = self.last_snapshot
        if snap is None or snap.state is not SafetyState.ARMED:
            self._note("not armed: a then enter arms")
            return
        if snap.source is not None:     # drive --input: the device alone drives (the input panel says so)
            self._note("an input device drives: no typed setpoints")
            return
        if self.drive.mode is not DriveMode.LATCHED:
            self._note("typed setpoints need latched mode: m switches")
            return
        envelope = self.profile.envelope
        self.push_screen(SetpointScreen(self.drive.request, (envelope.top_reverse_speed_mps, envelope.top_speed_mps),
                                        envelope.top_turn_rate_radps), self._setpoint_typed)

    def _setpoint_typed(self, values: tuple[float, float] | None) -> None:
        if values is None:
            return
        self._key()
        snap = self.last_snapshot
        if snap is None or snap.state is not SafetyState.ARMED or self.drive.mode is not DriveMode.LATCHED:
            self._note("setpoint dropped: no longer armed in latched mode")
            return
        sent = self.drive.set_exactly(*values, self.clock.now())
        self.loop.request(*sent)
        clamped = "" if sent == values else \
            f" (typed {values[0]:+g} m/s, {values[1]:+g} rad/s: clamped to the envelope)"
        self._note(f"setpoint {sent[0]:+.3f} m/s, {sent[1]:+.3f} rad/s{clamped}")

    def scale_steps(self, coarser: bool) -> None:
        self._key()
        if self.drive.scale_steps(coarser):
            self._note(f"steps {self.drive.speed_step_mps:g} m/s, {self.drive.turn_step_radps:g} rad/s")

    def toggle_mode(self) -> None:
        self._key()
        mode = self.drive.toggle_mode()
        self.loop.request(0.0, 0.0)
        self._note(f"{mode.value} mode; request to zero")
