"""`diffdeck profile check PROFILE [--json]`: validate a profile and show what its limits mean on the ground.

The raw limits say little by themselves; what a person needs before the first run is how fast the robot will
really go, how tight it can turn at that speed, and how far it travels before it stops.
"""

from __future__ import annotations

import argparse
import json

from rich.console import Console
from rich.table import Table

from console.files import STDOUT, atomic_output
from console.profile import Profile, load_profile
from shaping.ramp import AxisLimits, plan_ramp
from shaping.shaper import StopKind, speed_limits

NAME = "profile"
HELP = "check a robot profile and show the envelope it gives"
ORDER = 10


def add_arguments(parser: argparse.ArgumentParser) -> None:
    actions = parser.add_subparsers(dest="action", metavar="ACTION", required=True)
    check = actions.add_parser("check", help="validate PROFILE and print its derived envelope",
                               description="Validate PROFILE and print its derived envelope.")
    check.add_argument("profile", metavar="PROFILE", help="robot profile (TOML)")
    check.add_argument("--json", action="store_true", help="print the figures as one JSON object")


def _ramp(v0: float, target: float, limits: AxisLimits) -> tuple[float, float]:
    """(time, distance) of the time-optimal jerk-limited ramp from (v0, 0) to (target, 0)."""
    ramp = plan_ramp(v0, 0.0, target, limits)
    return ramp.duration, abs(ramp.travel())


def envelope_figures(profile: Profile) -> dict[str, object]:
    """The derived envelope, flat, with the unit in every key; infinite radii become None (JSON null)."""
    envelope = profile.envelope
    top = envelope.top_speed_mps
    turn_at_top = envelope.max_turn_rate_at(top)
    normal = speed_limits(profile.limits)
    accel_time, accel_distance = _ramp(0.0, top, normal)
    stop_time, stop_distance = _ramp(top, 0.0, normal)
    fast_time, fast_distance = _ramp(top, 0.0, speed_limits(profile.limits, StopKind.FAST))
    return {
        "profile": str(profile.path),
        "name": profile.name,
        "top_speed_mps": top,
        "top_reverse_speed_mps": envelope.top_reverse_speed_mps,
        "top_turn_rate_radps": envelope.top_turn_rate_radps,
        "turn_rate_at_top_speed_radps": turn_at_top,
        "min_turn_radius_at_top_speed_m": top / turn_at_top if turn_at_top > 0.0 else None,
        "accel_time_s": accel_time,
        "accel_distance_m": accel_distance,
        "controlled_stop_time_s": stop_time,
        "controlled_stop_distance_m": stop_distance,
        "fast_stop_time_s": fast_time,
        "fast_stop_distance_m": fast_distance,
    }


_ROWS = (
    ("top speed, forward", "top_speed_mps", "m/s"),
    ("top speed, reverse", "top_reverse_speed_mps", "m/s"),
    ("turn rate, spinning in place", "top_turn_rate_radps", "rad/s"),
    ("turn rate still available at top speed", "turn_rate_at_top_speed_radps", "rad/s"),
    ("tightest turn radius at top speed", "min_turn_radius_at_top_speed_m", "m"),
    ("rest to top speed: time", "accel_time_s", "s"),
    ("rest to top speed: distance", "accel_distance_m", "m"),
    ("controlled stop from top speed: time", "controlled_stop_time_s", "s"),
    ("controlled stop from top speed: distance", "controlled_stop_distance_m", "m"),
    ("fast stop from top speed: time", "fast_stop_time_s", "s"),
    ("fast stop from top speed: distance", "fast_stop_distance_m", "m"),
)


def _show(figures: dict[str, object]) -> None:
    table = Table(title=str(figures["name"]), caption=str(figures["profile"]), title_justify="left",
                  caption_justify="left")
    table.add_column("derived envelope")
    table.add_column("value", justify="right")
    table.add_column("unit")
    for label, key, unit in _ROWS:
        value = figures[key]
        table.add_row(label, "none: cannot turn at top speed" if value is None else f"{value:.3f}", unit)
    console = Console()
    console.print(table)
    console.print("profile OK. Stopping figures are for the shaped commands on good ground; a software stop is not a "
                  "safety function: keep a hardware emergency stop within reach.")


def run(args: argparse.Namespace) -> int:
    figures = envelope_figures(load_profile(args.profile))
    with atomic_output(STDOUT) as stdout:      # a full or closed standard output is one line too
        if args.json:
            stdout.write(json.dumps(figures, indent=2, allow_nan=False) + "\n")
        else:
            _show(figures)
    return 0

