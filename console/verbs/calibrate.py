"""`diffdeck calibrate PROFILE --side-m 3`: UMBmark odometry calibration and a corrected copy of the profile.

Borenstein and Feng, 1996 (see console/bench/umbmark.py): square runs clockwise and counter-clockwise; on the
simulated robot the end errors come from its true pose, on hardware the operator measures and types them. The
corrected profile is written next to the original; only `--write` replaces the original, after a backup.
"""

from __future__ import annotations

import argparse
import math
import shutil
import time
from pathlib import Path

from rich.console import Console

from console.bench.run import BenchRun
from console.bench.tomledit import edit_toml
from console.bench.umbmark import UmbmarkResult, corrected_values, return_error, square_program, umbmark
from console.errors import InputError, LinkLost
from console.files import check_output, write_atomic
from console.links import is_simulated
from console.options import add_link_options, with_link_options
from console.profile import Profile, load_profile
from console.prompts import ask, exactly

NAME = "calibrate"
HELP = "UMBmark odometry calibration: square runs both ways, wheel-diameter ratio and track-width corrections"
ORDER = 80

CONFIRMATION = "floor clear"
CAUTION = ("Calibration drives the robot ON THE FLOOR around a square: clear an area of at least the side plus 1 m, "
           "keep a hardware emergency stop within reach. A software stop is not a safety function.")
MAX_SIDE_M = 50.0


def add_arguments(parser: argparse.ArgumentParser) -> None:
    parser.add_argument("profile", metavar="PROFILE", help="robot profile (TOML)")
    parser.add_argument("--side-m", type=float, default=3.0, help="side of the square in m (default 3)")
    parser.add_argument("--runs", type=int, help="runs per direction (default: 1 on the simulated robot, 5 on "
                        "hardware, as the procedure recommends)")
    add_link_options(parser)
    parser.add_argument("--out", metavar="DIR", default="recordings", help="folder for the run recordings")
    parser.add_argument("--write", action="store_true",
                        help="replace PROFILE itself with the corrected one (a backup PROFILE.bak is kept)")


def parse_end_position(text: str) -> tuple[float, float]:
    """Two numbers "x y" in m (forward and to the left of the start mark, in the start heading's frame)."""
    parts = text.replace(",", " ").split()
    try:
        x, y = (float(part) for part in parts)
    except ValueError:
        raise InputError("calibrate", "end position", text.strip() or "(none)",
                         "two numbers in m: forward and leftward offset from the start mark, e.g. 0.12 -0.05") from None
    if not (math.isfinite(x) and math.isfinite(y)) or max(abs(x), abs(y)) > MAX_SIDE_M:
        raise InputError("calibrate", "end position", text.strip(), f"finite offsets within {MAX_SIDE_M:g} m")
    return x, y


def _run_square(console: Console, profile: Profile, side: float, clockwise: bool, args: argparse.Namespace,
                on_sim: bool) -> tuple[float, float]:
    program = square_program(profile, side, clockwise)
    name = "clockwise" if clockwise else "counter-clockwise"
    if not on_sim:
        ask(console, f"Put the robot on the start mark facing along +x, then type [bold]{CONFIRMATION}[/] to drive "
                     f"the {name} square:", exactly(CONFIRMATION, "calibrate", "confirmation"),
            where="calibrate", field="confirmation")
    run = BenchRun(profile, program, out_dir=Path(args.out), link_url=profile.link.url)
    if run.fast:
        result = run.run_to_end()
    else:
        run.start()
        try:
            while not run.progress.done:
                time.sleep(0.05)
        finally:
            result = run.close()          # ctrl+c or a signal: brought to rest (session.bring_to_rest) first
    if not result.completed:
        raise LinkLost(f"calibrate: the {name} run did not complete ({result.failure or result.cause}); "
                       f"recording kept in {result.recording}")
    measured = None
    if not on_sim:
        measured = ask(console, "Measure where the robot's reference point stopped relative to the start mark: "
                                "type 'x y' in m (x forward, y to the left):", parse_end_position,
                       where="calibrate", field="end position")
    return return_error(result.recording, profile, measured)


def _runs(console: Console, profile: Profile, args: argparse.Namespace, on_sim: bool,
          runs: int) -> UmbmarkResult:
    errors: dict[bool, list[tuple[float, float]]] = {True: [], False: []}
    for clockwise in (True, False):
        for k in range(runs):
            error = _run_square(console, profile, args.side_m, clockwise, args, on_sim)
            errors[clockwise].append(error)
            console.print(f"calibrate: {'CW' if clockwise else 'CCW'} run {k + 1}/{runs}: return error "
                          f"x {error[0]:+.4f} m, y {error[1]:+.4f} m")
    return umbmark(args.side_m, profile.geometry.track_width_m, errors[True], errors[False])


def _corrected_path(profile: Profile) -> Path:
    return profile.path.with_name(f"{profile.path.stem}.calibrated.toml")


def run(args: argparse.Namespace) -> int:
    profile = with_link_options(args, load_profile(args.profile), "calibrate")
    if not 0.0 < args.side_m <= MAX_SIDE_M:
        raise InputError("command line", "--side-m", args.side_m, f"a side in m, > 0 and <= {MAX_SIDE_M:g}")
    on_sim = is_simulated(profile.link.url)
    runs = args.runs if args.runs is not None else (1 if on_sim else 5)
    if not 1 <= runs <= 20:
        raise InputError("command line", "--runs", runs, "1 to 20 runs per direction")
    try:
        square_program(profile, args.side_m, True)
    except ValueError:
        raise InputError("command line", "--side-m", args.side_m, "long enough to reach the calibration speed and "
                         "stop again with this profile's limits") from None
    target = profile.path if args.write else _corrected_path(profile)
    backup = profile.path.with_name(profile.path.name + ".bak")
    for path in (target, backup) if args.write else (target,):
        check_output(path)      # before anything moves: an output that cannot be written would lose the runs
    console = Console(stderr=True)
    console.print(CAUTION)
    result = _runs(console, profile, args, on_sim, runs)
    console.print(
        f"UMBmark ({args.side_m:g} m): CW centre ({result.cw[0]:+.4f}, {result.cw[1]:+.4f}) m, CCW centre "
        f"({result.ccw[0]:+.4f}, {result.ccw[1]:+.4f}) m, E_max,syst {result.max_error_m:.4f} m\n"
        f"  type A (track width): alpha {math.degrees(result.alpha_rad):+.3f} deg per turn -> E_b "
        f"{result.track_width_factor:.5f}\n"
        f"  type B (wheel diameters): beta {math.degrees(result.beta_rad):+.3f} deg per leg -> E_d = D_R/D_L "
        f"{result.wheel_diameter_ratio:.5f}")
    changes = corrected_values(profile, result)
    text = edit_toml(profile.path.read_text(encoding="utf-8"), changes)
    staging = target.with_name(f".{target.name}.check.toml")
    write_atomic(staging, text)
    try:
        corrected = load_profile(staging)            # the corrected copy must itself be a valid profile
    finally:
        staging.unlink(missing_ok=True)
    if args.write:
        shutil.copy2(profile.path, backup)
        console.print(f"calibrate: backup {backup}")
    write_atomic(target, text)
    for (section, key), value in changes.items():
        console.print(f"  [{section}] {key} = {value}", markup=False)
    console.print(f"calibrate: corrected profile {target}")
    if on_sim:
        after = _runs(console, corrected, args, on_sim, 1)
        console.print(f"calibrate: with the corrected profile E_max,syst {after.max_error_m:.4f} m "
                      f"({result.max_error_m / max(after.max_error_m, 1e-12):.1f} x smaller)")
    return 0
