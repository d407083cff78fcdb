"""`diffdeck replay RECORDING.csv [--profile PROFILE] [--at T]`: watch a recording again in the drive screen's panels.

Read-only: no link is opened and nothing can be armed, so no robot moves. The recording is read and checked before
the screen opens: a file that is not a recording is one line and exit code 2. What the recording lacks (an older
version's columns, a killed run's missing sidecar and cut last line) is said on the screen's first event lines and
in the title, and the rest replays.

The rows are converted to numbers as they are first shown (console/replay.py, `Rows`): a bad cell in the rows of the
first frame is found before the screen opens, one further on when the screen first shows it (the screen closes and
the one line says where).

Exit codes: 0 closed with q; 2 bad input (not a recording, a bad cell, a bad sidecar or profile, --at outside the
recording).
"""

from __future__ import annotations

import argparse
import math

from console.errors import InputError

NAME = "replay"
HELP = "watch a recording again in the console's panels, read-only: play, step, jump to stops, faults and limits"
ORDER = 75


def add_arguments(parser: argparse.ArgumentParser) -> None:
    parser.add_argument("recording", metavar="RECORDING.csv", help="a session recording (drive, play or bench)")
    parser.add_argument("--profile", metavar="PROFILE",
                        help="robot profile (TOML) whose limits are shown; default: the one in the recording's "
                             "sidecar (a run killed before its end has no sidecar: give it here)")
    parser.add_argument("--at", type=float, metavar="T", help="open at this time, seconds (as `report` prints it)")


def run(args: argparse.Namespace) -> int:
    from console.replay import open_replay  # numpy and the profile reader: only once the arguments are good

    replay = open_replay(args.recording, args.profile)
    if args.at is not None and not (math.isfinite(args.at) and replay.start_s - 1e-9 <= args.at
                                    <= replay.end_s + 1e-9):
        raise InputError("command line", "--at", args.at, f"a time within the recording, {replay.start_s:.3f} to "
                                                         f"{replay.end_s:.3f} s")
    from console.ui.replay import TRAIL_S, ReplayApp  # Textual: only when there is something to show

    t_s = replay.start_s if args.at is None else args.at
    replay.source.ensure(replay.row_at(t_s - TRAIL_S), replay.row_at(t_s) + 2)   # a bad cell there: before the screen
    app = ReplayApp(replay, at_s=args.at)
    code = app.run()
    if app.error is not None:
        raise app.error
    return int(code) if code is not None else 0
