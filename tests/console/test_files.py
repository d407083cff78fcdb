"""The one output writer (console/files.py): all or nothing, never over something that is not a regular file, no
temporary file left behind on any failure (an exception, a full disk, a signal). The full disk is faked with a file
object whose write raises ENOSPC, the errno POSIX gives for it (IEEE Std 1003.1-2017, write()); no device node is
ever written or replaced here: the device used (/dev/null) is only ever looked at.
"""

from __future__ import annotations

import os
import signal
import stat
from pathlib import Path
import pytest

from console import files
from console.cli import Terminated, _raise_terminated
from console.errors import InputError, OutputError
from tests.console.faults import DiskFillsUp


def names(folder: Path) -> list[str]:
    return sorted(p.name for p in folder.iterdir())


def test_a_complete_write_replaces_the_file_and_keeps_its_mode(tmp_path: Path) -> None:
    target = tmp_path / "out.csv"
    target.write_text("old\n")
    target.chmod(0o640)
    assert files.write_atomic(target, "new\n") == target
    assert target.read_text() == "new\n"
    assert stat.S_IMODE(target.stat().st_mode) == 0o640
    assert names(tmp_path) == ["out.csv"]


def test_an_error_while_writing_keeps_the_old_file_and_removes_the_temporary_one(tmp_path: Path) -> None:
    target = tmp_path / "out.csv"
    target.write_text("old\n")
    with pytest.raises(ValueError, match="half"):
        with files.atomic_output(target) as handle:
            handle.write("new, half written")
            raise ValueError("half")
    assert target.read_text() == "old\n"
    assert names(tmp_path) == ["out.csv"]


def test_a_full_disk_is_one_output_error_and_leaves_nothing(tmp_path: Path, monkeypatch: pytest.MonkeyPatch) -> None:
    real_fdopen = os.fdopen
    monkeypatch.setattr(files.os, "fdopen", lambda *a, **k: DiskFillsUp(real_fdopen(*a, **k)))
    target = tmp_path / "out.csv"
    with pytest.raises(OutputError) as caught:
        files.write_atomic(target, b"rows\n")
    assert caught.value.exit_code == 6
    assert str(caught.value) == f"{target}: cannot be written (No space left on device)"
    assert names(tmp_path) == []


def test_a_signal_while_writing_leaves_no_temporary_file(tmp_path: Path) -> None:
    previous = signal.signal(signal.SIGTERM, _raise_terminated)
    try:
        with pytest.raises(Terminated):
            with files.atomic_output(tmp_path / "out.csv") as handle:
                handle.write("rows\n")
                os.kill(os.getpid(), signal.SIGTERM)
                handle.write("more\n")
    finally:
        signal.signal(signal.SIGTERM, previous)
    assert names(tmp_path) == []


def test_targets_that_are_not_regular_files_are_refused_and_left_alone(tmp_path: Path) -> None:
    real = tmp_path / "real.csv"
    real.write_text("kept\n")
    link = tmp_path / "link.csv"
    link.symlink_to(real)
    fifo = tmp_path / "pipe"
    os.mkfifo(fifo)
    for target, kind in ((tmp_path, "a folder"), (link, "a symlink"), (fifo, "a FIFO"),
                         (Path(os.devnull), "a character device")):
        with pytest.raises(OutputError, match=f"exists and is {kind}"):
            files.write_atomic(target, "x\n")
    assert link.is_symlink() and real.read_text() == "kept\n"
    assert stat.S_ISFIFO(fifo.lstat().st_mode)
    assert stat.S_ISCHR(os.lstat(os.devnull).st_mode)
    assert names(tmp_path) == ["link.csv", "pipe", "real.csv"]


def test_a_missing_folder_is_refused(tmp_path: Path) -> None:
    with pytest.raises(OutputError, match="does not exist"):
        files.write_atomic(tmp_path / "nowhere" / "out.csv", "x\n")


def test_dash_streams_to_standard_output(capsys: pytest.CaptureFixture[str]) -> None:
    with files.atomic_output(files.STDOUT) as handle:
        handle.write("rows\n")
    assert capsys.readouterr().out == "rows\n"


def test_inputs_must_be_regular_files_and_a_fifo_is_refused_without_blocking(tmp_path: Path) -> None:
    fifo = tmp_path / "pipe"
    os.mkfifo(fifo)     # nobody ever writes to it: an open() that waited for a writer would hang this test
    with pytest.raises(InputError, match="is a FIFO"):
        files.read_input(fifo, "a profile")
    with pytest.raises(InputError, match="is a character device"):
        files.read_input("/dev/zero", "a profile")
    with pytest.raises(InputError, match="is a folder"):
        files.read_input(tmp_path, "a profile")
    big = tmp_path / "big.toml"
    big.write_bytes(b"#" * 2000)
    with pytest.raises(InputError, match="at most 1000 bytes"):
        files.read_input(big, "a profile", max_bytes=1000)
    assert files.read_input(big, "a profile") == b"#" * 2000


def test_a_new_file_gets_the_mode_open_would_give_it(tmp_path: Path) -> None:
    """open(2) creates a file with mode 0666 cleared by the umask (POSIX.1-2017, open(), O_CREAT)."""
    previous = os.umask(0o027)
    try:
        files.write_atomic(tmp_path / "new.csv", "x\n")
    finally:
        os.umask(previous)
    assert stat.S_IMODE((tmp_path / "new.csv").stat().st_mode) == 0o640
