"""The command-line options every verb that opens a link shares: `--link URL` and `--baud N`.

One place, so `drive`, `play`, `bench` and `calibrate` spell, check and apply them alike; the profile file itself is
never touched, the verb works on a copy with the overrides.
"""

from __future__ import annotations

import argparse
import dataclasses

from console.errors import InputError
from console.profile import BAUD_RANGE, Profile


def add_link_options(parser: argparse.ArgumentParser) -> None:
    parser.add_argument("--link", metavar="URL", help="'sim' (the built-in simulated robot), a device path such as "
                        "/dev/ttyACM0 or a pyserial URL such as socket://host:port (trace+ before any of them logs "
                        "every byte); default: the profile's [link] url. `diffdeck ports` lists the serial ports")
    parser.add_argument("--baud", metavar="N", type=int, help="serial speed in baud for a device path (default: the "
                        "profile's [link] baud)")


def with_link_options(args: argparse.Namespace, profile: Profile, verb: str) -> Profile:
    """The profile with --link and --baud applied; a bad value is one line (InputError, exit 2) before anything
    opens."""
    link = profile.link
    if args.link is not None:
        if not args.link.strip():
            raise InputError(verb, "--link", args.link, "'sim', a device path or a pyserial URL")
        link = dataclasses.replace(link, url=args.link.strip())
    if args.baud is not None:
        low, high = BAUD_RANGE
        if not low <= args.baud <= high:
            raise InputError(verb, "--baud", args.baud, f"a whole number of baud from {low} to {high}")
        link = dataclasses.replace(link, baud=args.baud)
    return dataclasses.replace(profile, link=link)
