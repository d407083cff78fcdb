"""Rich tables that are never cut: printed whole where they fit, at their own width when piped.

Rich squeezes a table that is wider than the console by cutting headers and cells ("overshoot %" -> "oversh..."),
which in a report or a port list misleads rather than saves room.
"""

from __future__ import annotations

from rich.console import Console
from rich.measure import Measurement
from rich.table import Table


def console_for(console: Console, table: Table) -> Console | None:
    """The console to print `table` on uncut: itself where it fits, a wider one for piped output (no terminal to
    fit), None in a terminal too narrow for it (the caller prints the rows as lines instead)."""
    needed = Measurement.get(console, console.options.update_width(10_000), table).maximum
    if console.width >= needed:
        return console
    if not console.is_terminal:
        return Console(file=console.file, width=needed)
    return None
