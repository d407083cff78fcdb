"""Byte links to the robot: every real one through pyserial's URL handlers, plus an in-memory pair for the sim.

The control loop only sees `write`, a non-blocking `read` and `close`; a link that goes away (unplugged adapter,
closed pty, reset TCP bridge, closed memory end) raises `LinkLost` with one line naming the link, never anything else.
"""

from __future__ import annotations

import os
import threading
from typing import Protocol

import serial

from console.errors import InputError, LinkLost, LinkOpenError
from console.profile import link_url_problem

READ_CHUNK = 4096          # bytes taken per read(); more stays in the OS buffer for the next cycle
WRITE_TIMEOUT_S = 0.1      # a write blocked this long means the link no longer drains: treated as lost
MEMORY_CAPACITY = 1 << 20  # bytes an in-memory end may hold unread before the writer counts the link as lost


class Transport(Protocol):
    url: str

    def write(self, data: bytes) -> None: ...      # raises LinkLost when the link is gone
    def read(self) -> bytes: ...                   # what is available now (b"" if nothing); LinkLost when gone
    def close(self) -> None: ...


def _lost(url: str, error: BaseException) -> LinkLost:
    reason = " ".join(str(error).split()) or type(error).__name__
    return LinkLost(f"link lost: {url}: {reason}")


class SerialTransport:
    """A pyserial port opened from a URL, read without blocking (timeout=0 returns what is there)."""

    def __init__(self, port: serial.SerialBase, url: str) -> None:
        self._port = port
        self.url = url

    def write(self, data: bytes) -> None:
        try:
            self._port.write(data)
        except serial.SerialTimeoutException as e:
            raise LinkLost(f"link lost: {self.url}: write blocked for more than {WRITE_TIMEOUT_S} s") from e
        except (serial.SerialException, OSError) as e:
            raise _lost(self.url, e) from e

    def read(self) -> bytes:
        try:
            return self._port.read(READ_CHUNK)
        except (serial.SerialException, OSError) as e:
            raise _lost(self.url, e) from e

    def close(self) -> None:
        try:
            self._port.close()
        except (serial.SerialException, OSError):
            pass    # closing a port that is already gone: nothing left to release


def open_url(url: str, baud: int) -> SerialTransport:
    """Open a device path or pyserial URL (socket://, rfc2217://, loop://, ...)."""
    # pyserial's RFC 2217 client refuses a write timeout (NotImplementedError); its socket gives up after 5 s itself.
    write_timeout = None if url.lower().startswith("rfc2217://") else WRITE_TIMEOUT_S
    problem = link_url_problem(url)
    if problem is not None:
        raise InputError("link", "url", url, problem)
    try:
        port = serial.serial_for_url(url, baudrate=baud, timeout=0, write_timeout=write_timeout)
    except ValueError as e:   # unknown URL scheme, bad parameters
        raise InputError("link", "url", url, " ".join(str(e).split())) from e
    except (serial.SerialException, OSError) as e:
        cause = os.strerror(e.errno) if isinstance(e.errno, int) else " ".join(str(e).split())
        raise LinkOpenError(f"cannot open the link {url}: {cause}; nothing was sent") from e
    return SerialTransport(port, url)


class _Pipe:
    """Two byte queues under one lock, shared by both ends of a memory pair."""

    def __init__(self) -> None:
        self.lock = threading.Lock()
        self.queues = (bytearray(), bytearray())
        self.closed_by: str | None = None


class MemoryTransport:
    """One end of an in-process byte pipe (thread-safe); `close()` on either end makes the other raise LinkLost."""

    def __init__(self, pipe: _Pipe, side: int, url: str) -> None:
        self._pipe = pipe
        self._inbox = pipe.queues[side]
        self._outbox = pipe.queues[1 - side]
        self.url = url

    def _check(self) -> None:
        if self._pipe.closed_by is not None:
            raise LinkLost(f"link lost: {self.url}: closed by the {self._pipe.closed_by} end")

    def write(self, data: bytes) -> None:
        with self._pipe.lock:
            self._check()
            if len(self._outbox) + len(data) > MEMORY_CAPACITY:
                raise LinkLost(f"link lost: {self.url}: the other end stopped reading ({MEMORY_CAPACITY} bytes unread)")
            self._outbox += data

    def read(self) -> bytes:
        with self._pipe.lock:
            self._check()
            data = bytes(self._inbox)
            self._inbox.clear()
            return data

    def close(self) -> None:
        with self._pipe.lock:
            if self._pipe.closed_by is None:
                self._pipe.closed_by = self.url.rpartition(":")[2]


def memory_pair(name: str = "sim") -> tuple[MemoryTransport, MemoryTransport]:
    """(console end, robot end) of an in-memory link; their urls are "NAME:console" and "NAME:robot"."""
    pipe = _Pipe()
    return MemoryTransport(pipe, 0, f"{name}:console"), MemoryTransport(pipe, 1, f"{name}:robot")
