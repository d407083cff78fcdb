"""The `diffdeck` command: discovers the verb modules in `console.verbs` and turns every way a run can end into one
line on stderr and a documented exit code (README.md, "Exit codes"). No Python traceback reaches a user: an
unexpected internal error writes its traceback to a log file, names the file in its one line and exits with
EXIT_INTERNAL.
"""

from __future__ import annotations

import argparse
import importlib
import os
import pkgutil
import signal
import sys
import tempfile
import threading
import traceback
from datetime import UTC, datetime
from types import FrameType, ModuleType
from typing import Any, NoReturn

from console import __version__, verbs
from console.errors import DiffdeckError, OutputError
from console.files import reason

EXIT_INTERNAL = 70          # an internal error (a bug): the traceback is in the log file the line names
EXIT_INTERRUPTED = 130      # Ctrl-C (128 + SIGINT)
EXIT_STDOUT_CLOSED = 141    # the reader of standard output went away (`| head`): 128 + SIGPIPE, as shells show it
ENDING_SIGNALS = (signal.SIGTERM, signal.SIGHUP)


class Terminated(BaseException):
    """SIGTERM or SIGHUP, raised in the main thread so every `finally` (temporary files, the stop) still runs."""

    def __init__(self, signum: int) -> None:
        super().__init__(signum)
        self.signum = signum


class _Parser(argparse.ArgumentParser):
    """A usage error is one line too: what was wrong and where to read the usage, exit code 2."""

    def error(self, message: str) -> NoReturn:
        _say(f"{' '.join(message.split())} (see {self.prog} --help)", prefix=f"{self.prog}: ")
        raise SystemExit(2)


def _verb_modules() -> list[ModuleType]:
    modules = [importlib.import_module(f"{verbs.__name__}.{info.name}")
               for info in pkgutil.iter_modules(verbs.__path__)]
    return sorted(modules, key=lambda module: module.ORDER)


def build_parser() -> argparse.ArgumentParser:
    parser = _Parser(
        prog="diffdeck",
        description="Bring up, bench-test and drive differential-drive robots. "
        "A software stop is not a safety function: keep a hardware emergency stop within reach.",
    )
    parser.add_argument("--version", action="version", version=f"diffdeck {__version__}")
    sub = parser.add_subparsers(dest="verb", metavar="VERB", required=True)
    for module in _verb_modules():
        verb_parser = sub.add_parser(module.NAME, help=module.HELP, description=module.HELP)
        module.add_arguments(verb_parser)
        verb_parser.set_defaults(run=module.run)
    return parser


def _raise_terminated(signum: int, frame: FrameType | None) -> None:
    raise Terminated(signum)


def _install_ending_signals() -> dict[int, Any]:
    """SIGTERM and SIGHUP raise Terminated where nothing else handles them (a verb may install its own); only the
    main thread may install handlers, so main() called from another thread leaves them as they are."""
    previous: dict[int, Any] = {}
    if threading.current_thread() is not threading.main_thread():
        return previous
    for signum in ENDING_SIGNALS:
        if signal.getsignal(signum) is signal.SIG_DFL:
            previous[signum] = signal.signal(signum, _raise_terminated)
    return previous


def _flush_stdout() -> None:
    """What is still buffered for standard output, written now so that a full device is this run's error."""
    try:
        sys.stdout.flush()
    except BrokenPipeError:
        raise
    except OSError as error:
        raise OutputError("standard output", f"cannot be written ({reason(error)})") from None


def _stdout_closed() -> int:
    """Point standard output at /dev/null so the interpreter's own flush at exit finds nothing to complain about."""
    try:
        devnull = os.open(os.devnull, os.O_WRONLY)
        os.dup2(devnull, sys.stdout.fileno())
        os.close(devnull)
    except (OSError, ValueError, AttributeError):
        pass        # standard output is not a real file (a test's capture): nothing to silence
    return EXIT_STDOUT_CLOSED


def _internal_error(error: BaseException) -> int:
    """One line naming the error and the log file that holds its traceback."""
    name = type(error).__name__
    try:
        fd, log = tempfile.mkstemp(prefix="diffdeck-error-", suffix=".log")
        with os.fdopen(fd, "w", encoding="utf-8") as handle:
            handle.write(f"diffdeck {__version__}, {datetime.now(UTC).isoformat()}, argv {sys.argv!r}\n")
            handle.write("".join(traceback.format_exception(error)))
        where = f"the traceback is in {log}"
    except OSError as log_error:
        where = f"no log could be written ({log_error.strerror})"
    _say(f"internal error ({name}: {' '.join(str(error).split())[:200]}); {where}; please report it")
    return EXIT_INTERNAL


def _say(line: str, prefix: str = "diffdeck: ") -> None:
    try:
        print(prefix + line, file=sys.stderr, flush=True)
    except OSError:
        pass        # stderr itself is gone: the exit code is all that is left


def main(argv: list[str] | None = None) -> int:
    previous = _install_ending_signals()
    try:
        args = build_parser().parse_args(argv)
        code = int(args.run(args))
        _flush_stdout()
        return code
    except DiffdeckError as error:
        _say(" ".join(str(error).split()))
        return error.exit_code
    except BrokenPipeError:
        return _stdout_closed()
    except KeyboardInterrupt:
        _say("interrupted")
        return EXIT_INTERRUPTED
    except Terminated as ending:
        _say(f"ended by {signal.Signals(ending.signum).name}")
        return 128 + ending.signum
    except SystemExit:
        raise           # argparse: --help, --version, and a usage error after its one line (exit 2)
    except Exception as error:  # noqa: BLE001 - the last line of defence: a bug, reported as one line and a log
        return _internal_error(error)
    finally:
        for signum, handler in previous.items():
            signal.signal(signum, handler)
