"""One error type per layer; the CLI turns any of them into one line on stderr and its exit code."""

from __future__ import annotations

MAX_SHOWN = 200     # characters of an offending value shown in the one line


class DiffdeckError(Exception):
    """Base of every error the CLI reports as a single line; `exit_code` is what the process returns."""

    exit_code = 2


class InputError(DiffdeckError):
    """Bad user input (profile, CSV, program, recording): names the file, the key or field, the value, what is
    allowed."""

    def __init__(self, where: str, key: str, value: object, allowed: str) -> None:
        self.where = where
        self.key = key
        self.value = value
        self.allowed = allowed
        shown = repr(value)
        if len(shown) > MAX_SHOWN:      # a megabyte of garbage in one field still makes one readable line
            shown = shown[: MAX_SHOWN - 3] + "..."
        super().__init__(f"{where}: {key} = {shown}: {allowed}")

    def __reduce__(self) -> tuple[type, tuple[str, str, object, str]]:
        """Rebuild from the four fields, so the error crosses a process boundary (the loop's child) as itself."""
        return type(self), (self.where, self.key, self.value, self.allowed)


class LinkLost(DiffdeckError):
    """The link to the robot went away (unplugged adapter, closed pty, reset TCP bridge)."""

    exit_code = 3


class LoopFailure(DiffdeckError):
    """An error inside a control cycle (a bug): the loop sent category-0 stop frames and the recording was kept."""

    exit_code = 7


class RobotFault(DiffdeckError):
    """The robot reported a fault or a watchdog trip."""

    exit_code = 4


class LinkOpenError(DiffdeckError):
    """The link could not be opened at all (no such device, permission, nothing listening): nothing was sent."""

    exit_code = 5


class OutputError(DiffdeckError):
    """An output (a file, a folder, standard output) cannot be written; what was there before is left as it was."""

    exit_code = 6

    def __init__(self, target: str, reason: str) -> None:
        self.target = target
        self.reason = reason
        super().__init__(f"{target}: {reason}")

    def __reduce__(self) -> tuple[type, tuple[str, str]]:
        return type(self), (self.target, self.reason)
