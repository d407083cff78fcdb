"""`diffdeck sim PROFILE --pty | --tcp 127.0.0.1:PORT`: the profile's simulated robot as its own process.

For rehearsing against the same bytes and timing a real robot gives: the console (or any serial terminal) opens the
printed device path or socket:// URL. The first line of standard output is that path (pty) or URL (TCP), so scripts
can read it; the process serves on the wall clock until SIGINT or SIGTERM and then exits 0.
"""

from __future__ import annotations

import argparse

from console.errors import InputError
from console.profile import load_profile
from console.sim.serve import PtyEnd, TcpEnd, parse_loopback, serve

NAME = "sim"
HELP = "serve a profile's simulated robot on a pseudo-terminal or a loopback TCP port"
ORDER = 30


def add_arguments(parser: argparse.ArgumentParser) -> None:
    parser.add_argument("profile", metavar="PROFILE", help="robot profile (TOML); its [sim] and [link] are used")
    where = parser.add_mutually_exclusive_group(required=True)
    where.add_argument("--pty", action="store_true",
                       help="open a pseudo-terminal and print its device path as the first line")
    where.add_argument("--tcp", metavar="HOST:PORT",
                       help="listen on a loopback address (port 0: any free one) and print the socket:// URL first")


def run(args: argparse.Namespace) -> int:
    address = parse_loopback(args.tcp) if args.tcp is not None else None   # bad input fails before anything opens
    profile = load_profile(args.profile)
    if address is None:
        end = PtyEnd()
        return serve(profile, end, end.path)
    try:
        tcp = TcpEnd(*address)
    except OSError as error:          # port taken, address not on this machine, no permission
        raise InputError("sim", "--tcp", args.tcp, f"cannot listen there: {error.strerror or error}") from None
    return serve(profile, tcp, tcp.url)
