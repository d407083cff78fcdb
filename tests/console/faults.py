"""Output faults for tests, faked in the file object so that nothing is mounted and no device is touched.

A full disk: write(2) on a full file system first writes what still fits, then fails with ENOSPC ("No space left on
device"; IEEE Std 1003.1-2017, write()). `DiskFillsUp` behaves so over any real file object.
"""

from __future__ import annotations

import errno
import os
from typing import Any


class DiskFillsUp:
    """A file object over `handle` on a disk with `room` bytes left: a write past it is cut short, the next fails."""

    def __init__(self, handle: Any, room: int = 0, code: int = errno.ENOSPC) -> None:
        self._handle = handle
        self._room = room
        self._code = code

    def write(self, data: Any) -> int:
        if self._room <= 0:
            raise OSError(self._code, os.strerror(self._code))
        written = self._handle.write(bytes(data[: self._room]) if isinstance(data, bytes | memoryview) else
                                     data[: self._room])
        self._room -= written
        return written

    def __getattr__(self, name: str) -> Any:
        return getattr(self._handle, name)

    def __enter__(self) -> DiskFillsUp:
        return self

    def __exit__(self, *exc: object) -> None:
        self._handle.close()
