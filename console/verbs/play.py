"""`diffdeck play PROFILE REQUESTS.csv`: stream a request trace through the control loop to the robot and record it.

The headless way to rehearse a manoeuvre on the simulated robot, or to repeat one exactly on a real robot on the
bench. The trace is the same CSV as `shape` reads (each row held until the next row's time). Everything is checked
before the link is opened, and the recording is only created once the link is up.

Exit codes: 0 the trace was played and the robot brought to a controlled stop; 2 bad input; 3 link lost; 4 the robot
reported a fault, an emergency stop or a watchdog trip; 7 the control loop failed inside a cycle (category-0 stop
frames sent, recording kept); 130 / 143 / 129 ended by Ctrl-C / SIGTERM / SIGHUP (the robot was brought to a
controlled stop and the recording kept with its sidecar: the trace was not played to its end, so scripts must not
mistake it for a completed run).
"""

from __future__ import annotations

import argparse
import bisect
import time
from collections.abc import Callable
from pathlib import Path

from rich.console import Console
from rich.progress import BarColumn, Progress, TextColumn

from console.core.safety import SafetyState, StopCause
from console.core.step import Snapshot, SourceStatus
from console.errors import InputError, LinkLost, LoopFailure, OutputError, RobotFault
from console.interrupts import Interrupts
from console.links import is_simulated, open_link
from console.loop import ControlLoop, VirtualClock, WallClock
from console.options import add_link_options, with_link_options
from console.profile import load_profile
from console.protocol import flag_names
from console.record import Recorder, default_path, sidecar_path
from console.session import ESCALATION, LoopHandle, bring_to_rest
from console.verbs.shape import TIME_EPS_S, Requests, read_requests

NAME = "play"
HELP = "stream a request trace through the control loop to the robot (real time) and record the session"
ORDER = 40

COUNTDOWN_S = 3
POLL_S = 0.01
FIRST_TELEMETRY_GRACE_S = 1.0
"""Beyond the profile's telemetry timeout, how long a freshly opened link may take to answer (adapters reset)."""
SETTLE_LIMIT_S = 60.0
"""After the last row, the longest the request is held while waiting for the shaped output to settle."""
STOP_LIMIT_S = 60.0

CAUTIONS = """\
Before anything moves:
  * Bench test: lift the robot so that its wheels are clear of the ground.
  * Keep a hardware emergency stop within reach. Ctrl-C here, like every software stop, is not a safety
    function: it cannot stop a robot whose firmware, cable or drive has failed.
  * Clear the robot's path, and work to your site's safety rules, the regulations where you are and the
    practice of qualified people.
Ctrl-C before arming aborts; while moving, Ctrl-C gives a controlled stop (again: fast stop, a third time: zero)."""


def add_arguments(parser: argparse.ArgumentParser) -> None:
    parser.add_argument("profile", metavar="PROFILE", help="robot profile (TOML)")
    parser.add_argument("requests", metavar="REQUESTS.csv",
                        help="request trace, header t_s,v_mps,omega_radps (the same file `shape` reads)")
    add_link_options(parser)
    parser.add_argument("--record", metavar="OUT.csv",
                        help="recording path (default recordings/<profile>-<UTC time>.csv); a .json sidecar is added")
    parser.add_argument("--fast", action="store_true",
                        help="virtual clock, as fast as the CPU allows (only with the simulated robot)")
    parser.add_argument("--yes", action="store_true", help="skip the safety cautions and the countdown")


class _Player:
    """The trace as the loop's request source: the row in force at each cycle, from the cycle `go` is set."""

    def __init__(self, requests: Requests, name: str) -> None:
        self.requests = requests
        self.go = False
        self.start_s: float | None = None
        self.trace_s = 0.0
        self._name = f"trace {name}"

    def poll(self, t_s: float, loop: LoopHandle) -> SourceStatus | None:
        if self.start_s is None:
            if not self.go:
                return None
            self.start_s = t_s
        self.trace_s = t_s - self.start_s
        r = self.requests
        i = bisect.bisect_right(r.t_s, self.trace_s + TIME_EPS_S) - 1
        loop.request(*((r.v_mps[i], r.omega_radps[i]) if i >= 0 else (0.0, 0.0)))
        return SourceStatus(self._name, f"{min(self.trace_s, r.t_s[-1]):.1f} / {r.t_s[-1]:.1f} s")

    @property
    def last_row_passed(self) -> bool:
        return self.start_s is not None and self.trace_s >= self.requests.t_s[-1] - TIME_EPS_S


class _Run:
    """One play session: the loop on a thread (wall clock) or driven cycle by cycle (virtual clock)."""

    def __init__(self, loop: ControlLoop, fast: bool, interrupts: Interrupts) -> None:
        self.loop, self.fast, self.interrupts = loop, fast, interrupts

    def wait(self, seconds: float) -> None:
        if self.fast:
            self.loop.run_cycles(max(1, round(seconds * self.loop.profile.link.rate_hz)))
        else:
            time.sleep(seconds)
        if self.loop.failure is not None:
            raise LoopFailure(f"control loop failed inside a cycle ({self.loop.failure!r}); category-0 stop frames "
                              "sent")

    def clock(self) -> float:
        """The run's time: the loop's own (virtual clock) or the wall's."""
        return self.loop.snapshot().t_s if self.fast else time.monotonic()

    def poll(self) -> Snapshot:
        self.wait(POLL_S if not self.fast else 1.0 / self.loop.profile.link.rate_hz)
        return self.loop.snapshot()

    def wait_for(self, done, limit_s: float, *, shown: Callable[[Snapshot], None] = lambda s: None) -> Snapshot | None:
        deadline = self.loop.snapshot().t_s + limit_s
        while True:
            snapshot = self.poll()
            shown(snapshot)
            if done(snapshot):
                return snapshot
            if snapshot.t_s >= deadline or self.interrupts.count:
                return None


def _say(line: str) -> None:
    """A progress line; a terminal that went away (SIGHUP) must not interrupt the stop that follows."""
    try:
        print(line, flush=True)
    except OSError:
        pass


def _progress_bar() -> Progress:
    """Trace time elapsed / total and the safety state, on stderr, in a terminal only (piped output stays lines)."""
    console = Console(stderr=True)
    return Progress(TextColumn("{task.description}"), BarColumn(),
                    TextColumn("{task.completed:5.1f} / {task.total:.1f} s"), TextColumn("{task.fields[state]}"),
                    console=console,
                    disable=not console.is_terminal, transient=True)


def _check_output(path: str | None) -> None:
    if path is None:
        return
    folder = Path(path).resolve().parent
    if not folder.is_dir():
        raise OutputError(path, f"--record: the folder {folder} does not exist")


def _fault_error(snapshot: Snapshot, url: str, record: Path) -> LinkLost | RobotFault | None:
    """The error a stop the player did not ask for ends the run with (None: the stop was ours)."""
    cause = snapshot.cause
    kept = f"; recording kept in {record}"
    if cause is StopCause.LINK_LOST:
        text = next((e.text for e in reversed(snapshot.events) if e.kind == "link"), f"link lost: {url}")
        return LinkLost(text + "; the robot's own watchdog must stop it" + kept)
    if cause in (StopCause.WATCHDOG, StopCause.FAULT, StopCause.ESTOP):
        what = f"{cause.value} (flags {' '.join(flag_names(snapshot.flags)) or 'none'})"
        return RobotFault(f"robot fault: {url} reports {what}; the console stopped" + kept)
    return None


def run(args: argparse.Namespace) -> int:
    profile = with_link_options(args, load_profile(args.profile), "play")
    requests = read_requests(args.requests)
    url = profile.link.url
    if args.fast and not is_simulated(url):
        raise InputError("command line", "--fast", url,
                         'only with the simulated robot (--link sim): a real robot runs in real time')
    _check_output(args.record)
    link = open_link(url, profile)
    sim, transport = link.sim, link.transport
    record = Path(args.record) if args.record else default_path(profile)
    try:
        recorder = Recorder(record, profile, url)
    except OSError as open_error:
        transport.close()
        raise InputError("command line", "--record", str(record),
                         f"cannot be written ({open_error.strerror})") from None
    player = _Player(requests, Path(args.requests).name)
    loop = ControlLoop(profile, transport, VirtualClock() if args.fast else WallClock(), sim=sim,
                       recorder=recorder, url=url, source=player)
    interrupts = Interrupts()
    session = _Run(loop, args.fast, interrupts)
    error: Exception | None = None
    try:
        _say(f"play: {profile.path} over {url} at {profile.link.rate_hz:g} Hz"
             f"{' (virtual clock)' if args.fast else ''}; recording to {record}")
        if not args.fast:
            loop.start()
        error = _play(args, session, player, url, record)
    finally:
        interrupts.restore()
        loop.close()
        stats = loop.stats()
        recorder.close(stats, loop.link_stats())
        error = error or recorder.problem     # a full disk: the run went on, the recording did not
    _say(f"play: {stats.cycles} cycles, {stats.overruns} missed periods, period error p99 "
         f"{stats.period_error_p99_s * 1e3:.3f} ms; recording {record} (+ {sidecar_path(record).name})")
    if error is not None:
        raise error
    return interrupts.exit_code


def _play(args: argparse.Namespace, session: _Run, player: _Player, url: str, record: Path) -> Exception | None:
    """Cautions, arming, the trace, the final stop. Returns the error to end with (the loop is still running)."""
    loop, interrupts = session.loop, session.interrupts
    timeout = loop.profile.link.telemetry_timeout_s
    if not args.yes and not args.fast:           # --fast runs only on the simulated robot: nothing real moves
        _say(CAUTIONS)
        for n in range(COUNTDOWN_S, 0, -1):
            _say(f"arming in {n} s ...")
            end = time.monotonic() + 1.0
            while time.monotonic() < end and not interrupts.count:
                time.sleep(POLL_S)
            if interrupts.count:
                _say("play: interrupted before arming; nothing moved")
                return None
    if session.wait_for(lambda s: s.link.telemetry_received > 0, timeout + FIRST_TELEMETRY_GRACE_S) is None:
        if interrupts.count:
            return None
        return LinkLost(f"link lost: {url}: no telemetry within {timeout + FIRST_TELEMETRY_GRACE_S:g} s of "
                        f"opening the link; nothing moved; recording kept in {record}")
    loop.arm()
    armed = session.wait_for(lambda s: s.state is SafetyState.ARMED or "arming refused" in
                             (s.events[-1].text if s.events else ""), 1.0)
    if armed is None or armed.state is not SafetyState.ARMED:
        reason = armed.events[-1].text if armed is not None else "arming did not happen"
        if armed is not None and "reports" in reason:
            return RobotFault(f"robot fault: {url}: {reason}; nothing moved")
        return None if interrupts.count else LinkLost(f"link lost: {url}: {reason}; nothing moved")
    _say("play: armed")
    player.go = True
    total_s = float(player.requests.t_s[-1])
    with _progress_bar() as bar:
        task = bar.add_task("play", total=total_s, state="armed")

        def show(s: Snapshot) -> None:
            bar.update(task, completed=min(player.trace_s, total_s), state=s.state.value)

        ended = session.wait_for(
            lambda s: s.state is not SafetyState.ARMED or (player.last_row_passed and s.shaped.settled),
            total_s + SETTLE_LIMIT_S + 1.0, shown=show)
    snapshot = loop.snapshot()
    if snapshot.state is not SafetyState.ARMED:
        return _finish_unasked_stop(session, snapshot, url, record)
    cause = interrupts.cause if interrupts.count else StopCause.PROGRAM_END
    if interrupts.count:
        _say(f"play: {interrupts.name}: controlled stop")
    elif ended is None:
        _say(f"play: the output had not settled {SETTLE_LIMIT_S:g} s after the last row; stopping")
    return _stop(session, cause, url, record)


def _stop(session: _Run, cause: StopCause, url: str, record: Path) -> Exception | None:
    """Controlled stop (fast or immediate after more Ctrl-C / signals), escalated by every further one and whenever
    it takes longer than it should; the run's own clock (wall or virtual) paces it."""
    loop, interrupts = session.loop, session.interrupts
    kind = ESCALATION[min(max(interrupts.count, 1) - 1, 2)]
    bring_to_rest(loop, kind, cause, escalations=lambda: interrupts.count, wait=session.wait,
                  clock=session.clock, announce=lambda step: _say(f"play: {step.value} stop"))
    snapshot = loop.snapshot()
    error = _fault_error(snapshot, url, record)
    if error is None:
        _say(f"play: stopped ({snapshot.cause.value if snapshot.cause is not None else 'no cause'})")
    return error


def _finish_unasked_stop(session: _Run, snapshot: Snapshot, url: str, record: Path) -> Exception | None:
    """The loop stopped the robot by itself (link, watchdog, fault): let the stop finish, then report it."""
    if snapshot.state is SafetyState.STOPPING:
        snapshot = session.wait_for(lambda s: s.state is SafetyState.STOPPED, STOP_LIMIT_S) or session.loop.snapshot()
    return _fault_error(snapshot, url, record)
