"""`diffdeck input`: input devices for hold-to-drive (Linux input subsystem).

- `input list`: the devices this user can read, with what they can drive;
- `input watch [PATH] [--profile PROFILE]`: live raw events and what they ask for, to set up a profile's [input];
- `input map PROFILE EVENTS.csv`: what a recorded session asks of the robot, offline. Like `shape` for the keyboard's
  requests: before a gamepad drives anything, a person can see what its sticks and buttons become under the
  profile's [input] section (console/inputs/mapper.py): one output row per input event, the request before
  shaping, whether the hold-to-drive button is held, and any stop it asks for.
"""

from __future__ import annotations

import argparse
import math
import os
from pathlib import Path

from console.errors import InputError
from console.files import PLAIN_NUMBER, STDOUT, atomic_output, plain_number, read_csv_rows
from console.inputs.device import describe, list_devices, open_source, read_events
from console.inputs.mapper import (
    SPEED_SETTING_DEFAULT,
    SPEED_SETTING_RANGE,
    Event,
    InputConfig,
    KeyboardMapper,
    Mapper,
)
from console.profile import Profile, load_profile

NAME = "input"
HELP = "input devices: preview what recorded gamepad or keyboard events ask of the robot"
ORDER = 25

EVENT_HEADER = ("t_s", "type", "code", "value")
OUTPUT_HEADER = ("t_s", "v_mps", "omega_radps", "enabled", "stop")
EVENT_TYPES = ("EV_ABS", "EV_KEY", "EV_SYN", "EV_MSC")   # what a pad or a keyboard sends; the rest is refused


def add_arguments(parser: argparse.ArgumentParser) -> None:
    actions = parser.add_subparsers(dest="action", metavar="ACTION", required=True)
    actions.add_parser("list", help="the input devices this user can read", description="List the input devices "
                       "this user can read, with their path and what they can drive.")
    watch = actions.add_parser("watch", help="show live events and what they ask for",
                               description="Show a device's live events and what they ask for (Ctrl-C ends).")
    watch.add_argument("path", metavar="PATH", nargs="?",
                       help="/dev/input/eventN, or a FIFO of input_event records (default: the first gamepad)")
    watch.add_argument("--profile", metavar="PROFILE", help="map with this profile's [input] and envelope")
    preview = actions.add_parser("map", help="map recorded input events to requests (offline)",
                                 description="Map recorded input events to requests, offline.")
    preview.add_argument("profile", metavar="PROFILE", help="robot profile (TOML); its [input] section maps")
    preview.add_argument("events", metavar="EVENTS.csv",
                         help="header t_s,type,code,value (kernel names: EV_ABS,ABS_Y,-32768); a row "
                              "t_s,absinfo,ABS_Y,min:max:flat gives an axis's range")
    preview.add_argument("-o", "--output", metavar="OUT.csv", default=STDOUT,
                         help="write here instead of standard output")
    preview.add_argument("--source", choices=("gamepad", "keyboard"), default="gamepad",
                         help="what recorded the events: a gamepad (the profile's [input]) or a local keyboard "
                              "(hold an arrow to drive, [ and ] for the speed setting, x for a fast stop)")
    low, high = SPEED_SETTING_RANGE
    preview.add_argument("--speed-setting", type=float, default=SPEED_SETTING_DEFAULT, metavar="F",
                         help=f"the speed setting to start from, a fraction of top speed and turn rate ({low:g} to "
                              f"{high:g}, default {SPEED_SETTING_DEFAULT:g})")


def map_events(profile: Profile, path: str | Path, setting: float, source: str = "gamepad") -> list[str]:
    """The output rows (CSV lines) for an event file; the whole file is checked before anything is written."""
    envelope = profile.envelope
    tops = (envelope.top_speed_mps, envelope.top_reverse_speed_mps, envelope.top_turn_rate_radps)
    mapper: Mapper | KeyboardMapper = (Mapper(profile.input, *tops, setting=setting) if source == "gamepad"
                                       else KeyboardMapper(*tops, setting=setting))
    lines, previous = [",".join(OUTPUT_HEADER)], -math.inf
    for where, row in read_csv_rows(path, "an input event log (CSV)", EVENT_HEADER):
        t = plain_number(where, "t_s", row[0])
        if t < previous:
            raise InputError(where, "t_s", row[0], f"a time in s of at least the previous row's {previous:g}")
        previous = t
        kind, code, text = (field.strip() for field in row[1:])
        if kind == "absinfo":
            parts = text.split(":")
            if len(parts) != 3 or not all(PLAIN_NUMBER.fullmatch(part) for part in parts):
                raise InputError(where, "value", text[:40], "min:max:flat, three numbers (the axis's range)")
            low, high, flat = (float(part) for part in parts)
            if not (high > low and 0.0 <= flat < (high - low) / 2.0):
                raise InputError(where, "value", text[:40], "min < max and 0 <= flat < (max - min) / 2")
            if isinstance(mapper, Mapper):
                mapper.set_range(code, low, high, flat)
            continue
        if kind not in EVENT_TYPES:
            raise InputError(where, "type", kind[:40], "one of " + ", ".join(EVENT_TYPES) + ", or absinfo")
        if not code or not code.replace("_", "").isalnum():
            raise InputError(where, "code", code[:40], "an event code as the kernel names it (ABS_Y, BTN_TL, ...)")
        value = plain_number(where, "value", text)
        if value != int(value):
            raise InputError(where, "value", text[:40], "a whole number (the kernel reports integers)")
        request = mapper.feed(Event(t, kind, code, int(value)))
        stop = "" if request.stop is None else request.stop.value
        lines.append(f"{t:.10g},{request.v_mps:.10g},{request.omega_radps:.10g},{int(request.enabled)},{stop}")
    return lines


def _list() -> int:
    devices = list_devices()
    if not devices:
        print("no input devices readable here (none under /dev/input, or this user may not read them: the input "
              "group usually may)")
        return 0
    for device in devices:
        axes = ", ".join(f"{code} {low}..{high}" for code, (low, high, _) in device.axes.items()) or "no axes"
        print(f"{device.path}  {device.kind:8s}  {device.name}  ({axes}; {len(device.buttons)} buttons/keys)")
    return 0


def _watch(args: argparse.Namespace) -> int:
    path = args.path
    if path is None:
        pads = [device for device in list_devices() if device.kind == "gamepad"]
        if not pads:
            raise InputError("input watch", "PATH", "(none given)", "a device path: no gamepad found (see "
                                                                    "'diffdeck input list')")
        path = pads[0].path
    fd = open_source(path)
    if args.profile is None:
        mapper = Mapper(InputConfig(), 1.0, 1.0, 1.0, setting=1.0)   # positions as fractions of full stick
        units = ("of full stick", "of full stick")
    else:
        profile = load_profile(args.profile)
        envelope = profile.envelope
        mapper = Mapper(profile.input, envelope.top_speed_mps, envelope.top_reverse_speed_mps,
                        envelope.top_turn_rate_radps)
        units = ("m/s", "rad/s")
    try:
        if path.startswith("/dev/"):
            for code, (low, high, flat) in describe(path).axes.items():
                mapper.set_range(code, low, high, flat)
        print(f"watching {path}; Ctrl-C ends", flush=True)
        for event in read_events(fd):
            request = mapper.feed(event)
            stop = f"  stop {request.stop.value}" if request.stop else ""
            print(f"{event.t_s:14.6f}  {event.type:6s} {event.code:14s} {event.value:7d}  ->  speed "
                  f"{request.v_mps:+.3f} {units[0]}, turn {request.omega_radps:+.3f} {units[1]}, "
                  f"{'held' if request.enabled else 'released'}{stop}", flush=True)
        print(f"{path}: no more events (the device went away, or the FIFO was closed)")
    finally:
        os.close(fd)
    return 0


def run(args: argparse.Namespace) -> int:
    if args.action == "list":
        return _list()
    if args.action == "watch":
        return _watch(args)
    low, high = SPEED_SETTING_RANGE
    if not (math.isfinite(args.speed_setting) and low <= args.speed_setting <= high):
        raise InputError("command line", "--speed-setting", args.speed_setting, f"a fraction from {low:g} to {high:g}")
    lines = map_events(load_profile(args.profile), args.events, args.speed_setting, args.source)
    with atomic_output(args.output) as out:
        out.write("\n".join(lines) + "\n")
    return 0
