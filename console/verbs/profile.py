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
from shaping.body import tip_and_grip
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
        **body_figures(profile),
    }


BODY_CAUTION = ("Tip-over and traction figures are static, on level ground: slopes, payload shifts, bumps and the "
                "robot's own dynamics lower them. For anything people ride on or work beside, follow local codes "
                "and licensed practice.")


def _max_sideways_mps2(profile: Profile) -> float:
    """The largest |v x omega| the envelope allows without a sideways limit: v omega under v <= speed, omega <= turn
    rate and v + omega W / 2 <= rim speed (the outer wheel). On the wheel's line the product peaks at v = rim / 2."""
    limits, geometry = profile.limits, profile.geometry
    rim = limits.wheel_rate_radps * geometry.wheel_radius_m
    fastest = min(limits.speed_mps, rim)

    def product(v: float) -> float:
        return v * min(limits.turn_rate_radps, 2.0 * (rim - v) / geometry.track_width_m)

    corner = rim - limits.turn_rate_radps * geometry.track_width_m / 2.0   # where the two turn bounds meet
    candidates = [fastest, min(max(corner, 0.0), fastest), min(rim / 2.0, fastest)]
    return max(product(v) for v in candidates)


def body_figures(profile: Profile) -> dict[str, object]:
    """Static tip-over and traction limits of the [body], and a warning for each limit of the profile beyond them."""
    if profile.body is None:
        return {}
    grip = tip_and_grip(profile.body, profile.geometry.track_width_m)
    limits = profile.limits
    # speeding up or braking tips the robot over its front or its back depending on the direction of travel, and
    # both directions are driven: each longitudinal limit has to stay below the lower of the two
    longitudinal = min(grip.forward_tip_mps2, grip.backward_tip_mps2)
    sideways = limits.sideways_accel_mps2
    checks = [
        ("limits.accel_mps2", limits.accel_mps2, longitudinal, "tip-over (front or back)"),
        ("limits.decel_mps2", limits.decel_mps2, longitudinal, "tip-over (front or back)"),
        ("limits.stop_decel_mps2", limits.stop_decel_mps2, longitudinal, "tip-over (front or back)"),
        ("limits.sideways_accel_mps2", sideways if sideways is not None else _max_sideways_mps2(profile),
         grip.sideways_tip_mps2, "sideways tip-over"),
    ]
    checks += [(key, value, grip.traction_mps2, "traction") for key, value, _, _ in checks]
    warnings = []
    for key, value, bound, what in checks:
        if value > bound:
            given = f"{value:.3g} m/s^2" if key != "limits.sideways_accel_mps2" or sideways is not None else (
                f"not set (the envelope allows {value:.3g} m/s^2)")
            excess = f"{100.0 * (value / bound - 1.0):.0f} % over" if bound > 0.0 else "no margin at all"
            warnings.append(f"{key} = {given} exceeds the static {what} limit {bound:.3g} m/s^2: {excess}")
    return {
        "sideways_tip_mps2": grip.sideways_tip_mps2,
        "forward_tip_mps2": grip.forward_tip_mps2,
        "backward_tip_mps2": grip.backward_tip_mps2,
        "traction_mps2": grip.traction_mps2,
        "body_warnings": warnings,
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
    ("static tip-over, sideways", "sideways_tip_mps2", "m/s^2"),
    ("static tip-over, over the front", "forward_tip_mps2", "m/s^2"),
    ("static tip-over, over the back", "backward_tip_mps2", "m/s^2"),
    ("traction of the drive tyres", "traction_mps2", "m/s^2"),
)


def _show(figures: dict[str, object]) -> None:
    table = Table(title=str(figures["name"]), caption=str(figures["profile"]), title_justify="left",
                  caption_justify="left")
    table.add_column("derived envelope")
    table.add_column("value", justify="right")
    table.add_column("unit")
    for label, key, unit in _ROWS:
        if key not in figures:
            continue    # the body's figures, when the profile has no [body]
        value = figures[key]
        table.add_row(label, "none: cannot turn at top speed" if value is None else f"{value:.3f}", unit)
    console = Console()
    console.print(table)
    if "body_warnings" in figures:
        for warning in figures["body_warnings"]:  # type: ignore[attr-defined]
            console.print(f"warning: {warning}", markup=False, highlight=False, soft_wrap=True)  # one line each
        console.print(BODY_CAUTION)
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

