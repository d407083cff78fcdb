"""`diffdeck bench PROFILE PROGRAM [--link URL] [--out DIR]`: run a test program headless and record it.

On the simulated robot the run uses the virtual clock (as fast as the CPU allows); on hardware it runs in real time
and only after a typed confirmation, because a bench program drives the motors by itself.
"""

from __future__ import annotations

import argparse
import os
import sys
import time
from pathlib import Path

from rich.console import Console
from rich.progress import BarColumn, Progress, TextColumn, TimeRemainingColumn

from console.bench.polarity import OBSERVATIONS, has_pulses, record_observations
from console.bench.program import BUILTINS, BoundProgram, Program, resolve_program
from console.bench.recording import read_recording
from console.bench.run import BenchResult, BenchRun
from console.core.safety import StopCause
from console.errors import InputError, LinkLost, OutputError, RobotFault
from console.interrupts import Interrupts
from console.links import is_simulated
from console.options import add_link_options, with_link_options
from console.profile import load_profile
from console.prompts import ask, one_of
from console.session import bring_to_rest
from shaping.shaper import StopKind

NAME = "bench"
HELP = "run a bench test program (built-in or TOML) on the robot, wheels off the ground, and record it"
ORDER = 60

CONFIRMATION = "wheels up"
EXIT_INTERRUPTED = 130
"""The program did not run to its end (stopped from the screen); a signal's own code (128 + its number) wins."""
CAUTION = ("Bench test: the robot moves by itself. Wheels OFF THE GROUND (robot on a stand), a hardware emergency "
           "stop within reach. A software stop is not a safety function.")


def add_arguments(parser: argparse.ArgumentParser) -> None:
    parser.add_argument("profile", metavar="PROFILE", help="robot profile (TOML)")
    parser.add_argument("program", metavar="PROGRAM",
                        help="a built-in program (" + ", ".join(BUILTINS) + ") or a program file (TOML)")
    add_link_options(parser)
    parser.add_argument("--out", metavar="DIR", default="recordings", help="folder for the recording (default: "
                        "recordings)")
    parser.add_argument("--screen", action="store_true", help="show the bench screen (progress, safety state, live "
                        "plot); runs in real time, also on the simulated robot")


def _confirm(console: Console, url: str) -> None:
    console.print(f"[bold]{CAUTION}[/]")
    console.print(f"Type [bold]{CONFIRMATION}[/] to confirm the wheels are off the ground and the hardware stop is "
                  "within reach:")
    answer = sys.stdin.readline()
    if answer.strip().lower() != CONFIRMATION:
        raise InputError("bench", "confirmation", answer.strip() or "(none)",
                         f"type exactly {CONFIRMATION!r} to run on {url}")


def _say(console: Console, text: str) -> None:
    """A progress line; a terminal that went away (SIGHUP) must not interrupt the stop."""
    try:
        console.print(text)
    except OSError:
        pass


def _bypassing(program: Program) -> str:
    """Which segments go around the shaper, in a few words: all of them, or up to three by name."""
    names = [seg.name for seg in program.segments if seg.bypass]
    if len(names) == len(program.segments):
        return f"all {len(names)} segments run" if len(names) > 1 else f"segment {names[0]} runs"
    shown = ", ".join(names[:3]) + (f" and {len(names) - 3} more" if len(names) > 3 else "")
    return f"segment{'s' if len(names) > 1 else ''} {shown} run{'' if len(names) > 1 else 's'}"


def _outcome(result: BenchResult, interrupted: int) -> int:
    """The exit code: errors raised as their one line, else the signal's code, 130 for a program cut short, 0."""
    kept = f"; recording kept in {result.recording}"
    if result.failure is not None:
        raise LinkLost(f"bench: {result.failure}{kept}")
    if result.cause is StopCause.LINK_LOST:
        raise LinkLost(f"bench: link lost during the program; the robot's own watchdog must stop it{kept}")
    if result.cause in (StopCause.WATCHDOG, StopCause.FAULT, StopCause.ESTOP):
        raise RobotFault(f"bench: the robot reported a {result.cause.value}; the console stopped{kept}")
    if interrupted:
        return interrupted
    return EXIT_INTERRUPTED if not result.completed else 0


def run(args: argparse.Namespace) -> int:
    profile = with_link_options(args, load_profile(args.profile), "bench")
    program = resolve_program(args.program)
    out = Path(args.out)
    if out.exists() and not out.is_dir():
        raise InputError("command line", "--out", args.out, "a folder")
    # the folder the recording goes into must be possible before the caution asks for the wheels to go up
    existing = next(path for path in (out, *out.parents) if path.exists())
    if not existing.is_dir() or not os.access(existing, os.W_OK | os.X_OK):
        raise OutputError(str(out), f"cannot be created: {existing} is not a folder this user may write into")
    console = Console(stderr=True)
    url = profile.link.url
    BoundProgram(program, profile.envelope)          # every level checked before anything is asked or opened
    if program.bypasses:
        console.print(f"[bold yellow]Caution:[/] {_bypassing(program)} AROUND the shaper: no acceleration or jerk "
                      "limit, only the wheel-rate limit. The motors see raw steps.")
    ui_timeout: float | None = None
    if args.screen:
        from console.ui.bench_screen import UI_TIMEOUT_S
        ui_timeout = UI_TIMEOUT_S
    # the link opens first: a port that cannot be opened is said at once, not after the wheels went up
    bench = BenchRun(profile, program, out_dir=out, link_url=url, fast=False if args.screen else None,
                     ui_timeout_s=ui_timeout)
    if not is_simulated(url):
        try:
            _confirm(console, url)
        except BaseException:
            bench.discard()                  # nothing ran: no empty recording left behind
            raise
        if program.name == "polarity":
            console.print("Watch the wheels: afterwards you will be asked which wheel turned which way in the "
                          "'left forwards' and 'right forwards' pulses.")
    else:
        console.print(CAUTION)
    console.print(f"bench: {program.name} ({bench.bound.duration_s:g} s) on {profile.name} over {bench.url}"
                  f"{' (virtual clock)' if bench.fast else ''}; recording to {bench.path}")
    if args.screen:
        from console.ui.bench_screen import run_bench_screen

        code, result = run_bench_screen(bench)
        console.print(f"bench: recording {result.recording} (+ {result.bench_sidecar.name})")
        return _outcome(result, code)
    interrupts = Interrupts()
    try:
        with Progress(TextColumn("{task.description}"), BarColumn(), TextColumn("{task.fields[segment]}"),
                      TimeRemainingColumn(), console=console, transient=False) as bar:
            task = bar.add_task(program.name, total=bench.bound.duration_s, segment="")
            if not bench.fast:
                bench.start()
            while not bench.progress.done:
                if interrupts.count:
                    _say(console, f"bench: {interrupts.name}: controlled stop; the recording is kept")
                    bring_to_rest(bench.loop, StopKind.CONTROLLED, interrupts.cause,
                                  escalations=lambda: interrupts.count, wait=bench.wait, clock=bench.clock,
                                  announce=lambda kind: _say(console, f"bench: {kind.value} stop"))
                    break
                if bench.fast:
                    bench.step(50)
                else:
                    time.sleep(0.05)
                progress = bench.progress
                bar.update(task, completed=progress.t_s,
                           segment=f"{progress.segment_index + 1}/{progress.segment_count} {progress.segment_name}")
    finally:
        interrupts.restore()
        result = bench.close()
    code = _outcome(result, interrupts.exit_code)
    if code == 0 and not is_simulated(bench.url):
        _ask_observations(console, result)
    console.print(f"bench: recording {result.recording} (+ {result.bench_sidecar.name}); "
                  f"next: diffdeck report {result.recording}")
    return code


def _ask_observations(console: Console, result: BenchResult) -> None:
    """After a polarity program on hardware: which wheel the operator saw turn, which way (telemetry cannot tell)."""
    if not has_pulses(read_recording(result.recording)):
        return
    observed = {}
    for channel in ("left", "right"):
        field = f"observation ({channel} forwards)"
        observed[channel] = ask(console, f"In the '{channel} forwards' pulse, which wheel turned and which way? Type "
                                         "one of: " + ", ".join(OBSERVATIONS), one_of(OBSERVATIONS, "bench", field),
                                where=f"bench (the recording is kept in {result.recording})", field=field)
    record_observations(result.bench_sidecar, observed)
