"""`diffdeck drive PROFILE [--link URL]`: the operator console on a real robot or on the built-in simulated one.

The control loop runs in its own process (console.loop_process, wall clock, with the simulated robot for "sim"); the
Textual app only reads its snapshots and sends requests through the proxy. When the app ends (q, ctrl+c or a crash)
the robot gets a controlled stop and the loop keeps running until the robot is at rest, so leaving the console never
leaves a wheel turning; if this process dies instead, the loop's process stops the robot by itself.
"""

from __future__ import annotations

import argparse
import dataclasses
import gc
import math
import os
import sys
import threading
import time
from typing import TYPE_CHECKING

from console.core.safety import StopCause
from console.errors import InputError
from console.inputs.source import source_from_option
from console.links import is_simulated
from console.loop import WallClock
from console.options import add_link_options, with_link_options
from console.profile import Profile, load_profile
from console.record import default_path
from console.session import bring_to_rest
from console.ui.driving import DriveMode, DriveSettings
from shaping.shaper import StopKind

if TYPE_CHECKING:
    pass

NAME = "drive"
HELP = "open the operator console: arm, drive and stop the robot (or the simulated one) with live gauges"
ORDER = 50

UI_TIMEOUT_S = 0.75
"""No UI heartbeat for this long -> the loop stops the robot (fast stop). Many 40 ms render ticks; a terminal that
blocks the app for longer than this is not showing the operator the robot any more."""
UI_SWITCH_INTERVAL_S = 0.0001
SIGNAL_EXIT_GRACE_S = 5.0
"""After SIGTERM / SIGHUP, with the robot at rest and the recording closed, the UI gets this long to exit by itself."""
DEADMAN_RANGE_S = (0.3, 5.0)
KEEPALIVE_RANGE_S = (2.0, 120.0)


def add_arguments(parser: argparse.ArgumentParser) -> None:
    parser.add_argument("profile", metavar="PROFILE", help="robot profile (TOML)")
    add_link_options(parser)
    parser.add_argument("--mode", choices=[mode.value for mode in DriveMode], default=DriveMode.HOLD.value,
                        help="driving mode at start (switch with m): hold (default) or latched")
    parser.add_argument("--speed-step-mps", type=float, metavar="MPS",
                        help="speed nudge per arrow key (default: 1/20 of the top speed)")
    parser.add_argument("--turn-step-radps", type=float, metavar="RADPS",
                        help="turn-rate nudge per arrow key (default: 1/10 of the top turn rate)")
    parser.add_argument("--deadman-s", type=float, default=0.7, metavar="S",
                        help="hold mode: the request falls to zero this long after the last driving key "
                        "(default 0.7; keep it above the terminal's auto-repeat delay)")
    parser.add_argument("--keepalive-s", type=float, default=10.0, metavar="S",
                        help="latched mode: a key (k changes nothing) at least this often, else a controlled stop "
                        "(default 10, allowed 2..120)")
    parser.add_argument("--rate-hz", type=float, metavar="HZ", help="command rate (default: the profile's rate_hz)")
    parser.add_argument("--record", action=argparse.BooleanOptionalAction, default=None,
                        help="record the session to recordings/ (CSV + JSON sidecar); default: on a real link yes "
                        "(a black box of every session), on the simulated robot no")
    parser.add_argument("--input", default="terminal", metavar="SOURCE",
                        help="what drives: terminal (the console's keys, default), gamepad (the first one found), "
                        "gamepad:PATH or keyboard:PATH (a Linux input device, or a FIFO of its records); the "
                        "terminal's stop keys work whatever drives")


def _positive(key: str, value: float | None, allowed: str, low: float = 0.0, high: float = math.inf) -> None:
    if value is not None and not (math.isfinite(value) and low < value <= high):
        raise InputError("drive", key, value, allowed)


def settings_from(args: argparse.Namespace, profile: Profile) -> DriveSettings:
    """Drive settings from the command line; bad values are one clear line (exit 2) before anything opens."""
    _positive("--speed-step-mps", args.speed_step_mps, "a speed step > 0 m/s up to the top speed",
              high=profile.envelope.top_speed_mps)
    _positive("--turn-step-radps", args.turn_step_radps, "a turn-rate step > 0 rad/s up to the top turn rate",
              high=profile.envelope.top_turn_rate_radps)
    low, high = DEADMAN_RANGE_S
    if not (math.isfinite(args.deadman_s) and low <= args.deadman_s <= high):
        raise InputError("drive", "--deadman-s", args.deadman_s,
                         f"{low:g}..{high:g} s, above the terminal's auto-repeat delay (0.6-0.8 s is usual)")
    low, high = KEEPALIVE_RANGE_S
    if not (math.isfinite(args.keepalive_s) and low <= args.keepalive_s <= high):
        raise InputError("drive", "--keepalive-s", args.keepalive_s, f"{low:g}..{high:g} s")
    return DriveSettings.for_envelope(
        profile.envelope, speed_step_mps=args.speed_step_mps, turn_step_radps=args.turn_step_radps,
        deadman_s=args.deadman_s, keepalive_s=args.keepalive_s, mode=DriveMode(args.mode),
    )


def profile_for_link(args: argparse.Namespace, profile: Profile) -> Profile:
    """The profile with the command-line link overrides applied (the file itself is never touched)."""
    profile = with_link_options(args, profile, "drive")
    if args.rate_hz is None:
        return profile
    _positive("--rate-hz", args.rate_hz, "10..1000 Hz", low=9.999999, high=1000.0)
    return dataclasses.replace(profile, link=dataclasses.replace(profile.link, rate_hz=args.rate_hz))


def records(args: argparse.Namespace, profile: Profile) -> bool:
    """Whether this session is recorded: as asked, else always on a real link and never on the simulated robot."""
    return args.record if args.record is not None else not is_simulated(profile.link.url)


def run(args: argparse.Namespace) -> int:
    from console.loop_process import LoopProcess  # the loop's own process: the UI cannot make it late
    from console.ui.app import RENDER_HZ, DriveApp  # Textual is imported only when the console really opens

    profile = profile_for_link(args, load_profile(args.profile))
    settings = settings_from(args, profile)
    source = source_from_option(args.input, profile)     # checked (and found) here: one line, exit 2, nothing opens
    # start-up errors (bad URL, link lost on open, unwritable recording) are raised here, before any screen
    loop = LoopProcess(profile, url=profile.link.url, ui_timeout_s=UI_TIMEOUT_S,
                       operator_timeout_s=settings.keepalive_s,
                       record_path=default_path(profile) if records(args, profile) else None,
                       snapshot_hz=RENDER_HZ,    # one snapshot per screen refresh: more would be pickled for nothing
                       source=source)

    def start_loop() -> None:
        """Once the screen is up: keep the UI process's own pauses short, then start the loop.

        The loop runs in a child process (console.loop_process), so the UI's garbage collections and interpreter
        lock cannot delay its periods; what the UI still has to be quick for is passing keys on. gc.freeze() keeps
        the long-lived start-up objects out of every later collection, and a short switch interval lets the
        proxy's reader thread and the terminal's input thread in between two steps of a render.
        """
        gc.collect()
        gc.freeze()
        sys.setswitchinterval(UI_SWITCH_INTERVAL_S)
        loop.start()

    def stop_on_signal(signum: int) -> None:
        """SIGTERM / SIGHUP: stop and close the loop from a thread of its own at once. The app is asked to exit
        too, but with its terminal gone it may never get there; this thread then ends the process once the robot
        is at rest and the recording closed."""
        def shutdown() -> None:
            bring_to_rest(loop, StopKind.CONTROLLED, StopCause.SIGNAL)
            loop.close()
            time.sleep(SIGNAL_EXIT_GRACE_S)
            os._exit(128 + signum)

        threading.Thread(target=shutdown, name="diffdeck-signal-stop", daemon=True).start()

    app = DriveApp(loop, profile, WallClock(), settings, real_link=not is_simulated(profile.link.url),
                   on_ready=start_loop, on_ending_signal=stop_on_signal)
    try:
        app.run()
    finally:
        bring_to_rest(loop, StopKind.CONTROLLED, StopCause.PROGRAM_END)
        loop.close()                      # controlled stop; the child closes the recording (CSV + sidecar)
        if loop.record_path is not None:
            _say(f"diffdeck drive: recorded {loop.record_path}")
    if app.ended_by is not None:
        return 128 + app.ended_by         # SIGTERM / SIGHUP: the robot was brought to rest all the same
    if loop.failure is not None:
        _say(f"diffdeck drive: the control loop failed: {loop.failure}")
        return 1
    return 0


def _say(line: str) -> None:
    """One line on stderr; a terminal that went away (SIGHUP) must not turn the shutdown into a traceback."""
    try:
        print(line, file=sys.stderr)
    except OSError:
        pass
