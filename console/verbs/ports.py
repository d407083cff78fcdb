"""`diffdeck ports`: the serial ports this machine has, with what pyserial's port listing knows about each.

So that nobody has to guess `/dev/ttyACM0`: the device, its description and its hardware id (USB vendor and product
ids, serial number), from serial.tools.list_ports. The listing scans the operating system's serial devices; a
pseudo-terminal (what `diffdeck sim --pty` serves) is not a serial device there and is not listed: `sim` prints
its path when it starts.
"""

from __future__ import annotations

import argparse

from rich import box
from rich.console import Console
from rich.table import Table
from serial.tools import list_ports

from console.files import STDOUT, atomic_output
from console.tables import console_for

NAME = "ports"
HELP = "list the serial ports on this machine (device, description, hardware id)"
ORDER = 15
LINKS_WITHOUT_A_PORT = ("`--link sim` (the simulated robot in-process), the path `diffdeck sim` prints for its "
                        "pseudo-terminal, pyserial URLs such as `loop://` (a loopback) or `socket://HOST:PORT`")


def add_arguments(parser: argparse.ArgumentParser) -> None:
    parser.add_argument("--links", action="store_true",
                        help="also list symbolic links to serial devices (e.g. /dev/serial/by-id/...)")


def run(args: argparse.Namespace) -> int:
    ports = sorted(list_ports.comports(include_links=args.links), key=lambda port: port.device)
    with atomic_output(STDOUT):                  # a full or closed standard output is one line too
        console = Console()
        if not ports:
            console.print("no serial ports found (is the device plugged in, and may this user read it? on many "
                          "systems that needs the group owning /dev/ttyACM0, often `dialout`)", markup=False)
        else:
            table = Table(box=box.SIMPLE_HEAD, pad_edge=False)
            for column in ("device", "description", "hardware id"):
                table.add_column(column, no_wrap=True)
            for port in ports:
                table.add_row(port.device, port.description or "n/a", port.hwid or "n/a")
            fitting = console_for(console, table)
            if fitting is not None:
                fitting.print(table)
            else:
                for port in ports:
                    console.print(f"{port.device}: {port.description or 'n/a'}; {port.hwid or 'n/a'}", markup=False,
                                  highlight=False)
        console.print(f"links without a serial port: {LINKS_WITHOUT_A_PORT}", markup=False, highlight=False)
    return 0
