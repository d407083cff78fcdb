"""The one way diffdeck writes an output file: all of it or none of it, and never over something that is not a file.

Every output (shape -o, report -o, bench sidecars, the recorder's sidecar, the calibrated profile) goes through here:

- `check_output(path)` refuses, before any work is done, a target that exists and is not a regular file (a device,
  a FIFO, a folder, a symlink) and a target whose folder does not exist. Renaming over a device node would destroy
  it, renaming over a symlink would replace the link instead of its target: both are refused, never "fixed".
- `atomic_output(path)` yields a file opened under a temporary name beside the target (same folder, so the rename
  stays on one file system); on success it is flushed, fsync'd and renamed into place, so the target holds either its
  old content or the complete new one. On any failure, including a signal turned into an exception by the CLI, the
  temporary file is removed and the target is left as it was. `path == "-"` streams to standard output instead.
- `write_atomic(path, data)` is the same for data already in memory.
- `check_stream_target(path)` is the check for a file written as it goes (a recording): it may also be a FIFO;
  `make_folders` / `remove_folders` create an output folder and take it away again when nothing was written.
- `read_input(path, what)` reads an input file (a profile, a request trace, a recording) and refuses, before
  reading, anything that is not a regular file: a FIFO would block for ever, a device would never end.

Every output failure is an `OutputError` (exit code 6), every input failure an `InputError` (exit code 2), each
naming the file and the reason, never an OSError traceback.
"""

from __future__ import annotations

import csv
import io
import math
import os
import re
import stat
import sys
import tempfile
from collections.abc import Iterator
from contextlib import contextmanager
from pathlib import Path
from typing import IO, Any

from console.errors import InputError, OutputError

STDOUT = "-"
# A number in a CSV input: plain decimal or exponent notation. float() alone would also take "1_0" (as 10), "nan",
# "inf" and "infinity", none of which a trace or a recording should hold.
PLAIN_NUMBER = re.compile(r"\s*[-+]?(?:\d+\.?\d*|\.\d+)(?:[eE][-+]?\d+)?\s*")


def plain_number(where: str, name: str, text: str) -> float:
    """A plain decimal number from a CSV cell: float() alone would also take "1_0" (as 10), "nan" and "inf"."""
    value = float(text) if PLAIN_NUMBER.fullmatch(text) else math.nan
    if not math.isfinite(value):
        raise InputError(where, name, text[:40], "a finite number")
    return value


def _kind(mode: int) -> str:
    for test, name in ((stat.S_ISDIR, "a folder"), (stat.S_ISLNK, "a symlink"), (stat.S_ISFIFO, "a FIFO"),
                       (stat.S_ISCHR, "a character device"), (stat.S_ISBLK, "a block device"),
                       (stat.S_ISSOCK, "a socket")):
        if test(mode):
            return name
    return "not a regular file"


def reason(error: OSError) -> str:
    """The OS's own words for a failed write ("No space left on device"), without the errno number."""
    return error.strerror or type(error).__name__


def check_output(path: str | Path) -> Path:
    """The target as a Path, if a new regular file may be put there; OutputError saying why not."""
    target = Path(path)
    try:
        mode = os.lstat(target).st_mode
    except FileNotFoundError:
        mode = None
    except OSError as error:
        raise OutputError(str(target), f"cannot be checked ({reason(error)})") from None
    if mode is not None and not stat.S_ISREG(mode):
        raise OutputError(str(target), f"exists and is {_kind(mode)}; give the path of a regular file (it is "
                                       "replaced as a whole, so it may not be a device, FIFO, folder or symlink)")
    folder = target.parent
    if not folder.is_dir():
        raise OutputError(str(target), f"the folder {folder} does not exist")
    if not os.access(folder, os.W_OK | os.X_OK):
        raise OutputError(str(target), f"the folder {folder} is not writable")
    return target


def check_stream_target(path: str | Path) -> Path:
    """For a file written as it goes (a recording): a regular file, a FIFO (someone reads the rows live) or a
    symlink to either may be written into; a folder or a device may not. OutputError saying why not."""
    target = Path(path)
    try:
        mode = os.stat(target).st_mode
    except FileNotFoundError:
        return target
    except OSError as error:
        raise OutputError(str(target), f"cannot be checked ({reason(error)})") from None
    if not (stat.S_ISREG(mode) or stat.S_ISFIFO(mode)):
        raise OutputError(str(target), f"exists and is {_kind(mode)}; give the path of a regular file")
    return target


def make_folders(folder: str | Path) -> list[Path]:
    """Create `folder` and any missing parents; returns the folders created, outermost first, so that a failed run
    can take them away again (`remove_folders`). OutputError if one cannot be created or `folder` is not one."""
    folder = Path(folder)
    missing = [path for path in (folder, *folder.parents) if not path.exists()][::-1]
    for index, path in enumerate(missing):
        try:
            path.mkdir()
        except OSError as error:
            remove_folders(missing[:index])
            raise OutputError(str(folder), f"the folder cannot be created ({reason(error)})") from None
    if not folder.is_dir():
        raise OutputError(str(folder), "exists and is not a folder")
    return missing


def remove_folders(created: list[Path]) -> None:
    """Remove the folders `make_folders` created, innermost first, as far as they are still empty."""
    for path in reversed(created):
        try:
            path.rmdir()
        except OSError:
            return      # not empty (something was written into it) or already gone: leave it and its parents


def _new_file_mode(target: Path) -> int:
    """Keep the mode of the file being replaced; a new file gets the usual 0666 less the umask."""
    try:
        return stat.S_IMODE(os.stat(target).st_mode)
    except OSError:
        return 0o666 & ~_umask()


def _umask() -> int:
    """The process's umask, read without changing it (os.umask can only be read by setting it, which would leave
    a window in which another thread creates a file with no umask at all)."""
    try:
        with open("/proc/self/status", encoding="ascii") as status:
            for line in status:
                if line.startswith("Umask:"):
                    return int(line.split()[1], 8)
    except (OSError, ValueError):
        pass
    return 0o022        # common practice: the usual default umask


@contextmanager
def atomic_output(path: str | Path, binary: bool = False) -> Iterator[IO[Any]]:
    """A file to write the whole output into; renamed onto `path` when the block ends without an exception.

    Text mode writes UTF-8 with "\\n" line ends. `path == "-"` yields standard output (flushed at the end).
    """
    if str(path) == STDOUT:
        stream: IO[Any] = sys.stdout.buffer if binary else sys.stdout
        try:
            yield stream
            stream.flush()
        except BrokenPipeError:
            raise               # the reader closed the pipe: the CLI ends quietly
        except OSError as error:
            raise OutputError("standard output", f"cannot be written ({reason(error)})") from None
        return
    target = check_output(path)
    try:
        fd, temporary = tempfile.mkstemp(dir=target.parent, prefix=f".{target.name}.", suffix=".tmp")
    except OSError as error:
        raise OutputError(str(target), f"cannot be written ({reason(error)})") from None
    try:
        try:
            os.fchmod(fd, _new_file_mode(target))
            handle = os.fdopen(fd, "wb") if binary else os.fdopen(fd, "w", encoding="utf-8", newline="")
        except BaseException:
            os.close(fd)
            raise
        with handle:
            yield handle
            handle.flush()
            os.fsync(handle.fileno())
        check_output(target)    # it may have been replaced by something else while we wrote
        os.replace(temporary, target)
    except OSError as error:
        _remove(temporary)
        raise OutputError(str(target), f"cannot be written ({reason(error)})") from None
    except BaseException:
        _remove(temporary)
        raise
    _sync_folder(target.parent)


def write_atomic(path: str | Path, data: bytes | str) -> Path:
    """Write `data` (str: UTF-8) to `path` all at once or not at all; returns the path written."""
    if isinstance(data, str):
        data = data.encode("utf-8")
    with atomic_output(path, binary=True) as handle:
        handle.write(data)
    return Path(path)


def _remove(temporary: str) -> None:
    try:
        os.unlink(temporary)
    except OSError:
        pass        # already gone, or the folder itself went away: nothing left to clean


def _sync_folder(folder: Path) -> None:
    """Make the rename itself durable (the folder entry), where the file system allows opening a folder."""
    try:
        fd = os.open(folder, os.O_RDONLY | os.O_DIRECTORY)
    except OSError:
        return
    try:
        os.fsync(fd)
    except OSError:
        pass        # some file systems refuse fsync on a folder; the data itself is already on disk
    finally:
        os.close(fd)


def read_input(path: str | Path, what: str, *, max_bytes: int | None = None) -> bytes:
    """The whole content of an input file; InputError (exit 2) naming the file if it is not a readable regular file.

    The file is opened without blocking and checked before anything is read, so a FIFO or a device given by mistake
    is refused at once instead of waiting for a writer for ever (or reading /dev/zero until memory runs out).
    `what` says what the file should be ("a TOML profile"); `max_bytes` bounds what is read.
    """
    file = str(path)
    try:
        fd = os.open(file, os.O_RDONLY | os.O_NONBLOCK | os.O_CLOEXEC)
    except FileNotFoundError:
        raise InputError(file, "file", file, f"no such file; give the path of {what}") from None
    except OSError as error:
        raise InputError(file, "file", file, f"cannot be read ({reason(error)}); give the path of {what}") from None
    try:
        status = os.fstat(fd)
        if not stat.S_ISREG(status.st_mode):
            raise InputError(file, "file", file, f"is {_kind(status.st_mode)}; give the path of {what} "
                                                 "(a regular file)")
        if max_bytes is not None and status.st_size > max_bytes:
            raise InputError(file, "file", f"{status.st_size} bytes", f"at most {max_bytes} bytes for {what}")
        chunks = []
        while chunk := os.read(fd, 1 << 20):
            chunks.append(chunk)
        return b"".join(chunks)
    except OSError as error:
        raise InputError(file, "file", file, f"cannot be read ({reason(error)})") from None
    finally:
        os.close(fd)


def read_csv_rows(path: str | Path, what: str, header: tuple[str, ...]) -> Iterator[tuple[str, list[str]]]:
    """The rows of a UTF-8 CSV input under exactly `header`, each with where it is ("FILE, line N") for the one-line
    error; blank lines are skipped, and a row of the wrong length, bad CSV or a wrong header is an InputError."""
    file = str(path)
    try:
        text = read_input(path, what).decode("utf-8-sig")  # a spreadsheet may lead with a BOM
    except UnicodeDecodeError:
        raise InputError(file, "file", file, f"not UTF-8 text; give {what}, a UTF-8 CSV file") from None
    reader = csv.reader(io.StringIO(text, newline=""))
    try:
        first = next(reader, None)
        if first is None or [name.strip() for name in first] != list(header):
            raise InputError(f"{file}, line 1", "header", ",".join(first or [])[:80], "exactly " + ",".join(header))
        for row in reader:
            if not row or (len(row) == 1 and not row[0].strip()):
                continue
            where = f"{file}, line {reader.line_num}"
            if len(row) != len(header):
                raise InputError(where, "row", ",".join(row)[:80], f"{len(header)} fields: " + ",".join(header))
            yield where, row
    except csv.Error as error:
        raise InputError(f"{file}, line {reader.line_num}", "row", "", f"valid CSV ({error})") from None
