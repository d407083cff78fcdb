"""The robot ends used by `diffdeck sim`, in-process: a pty (opened from the console side with pyserial) and loopback
TCP (pyserial's socket:// URL). No timing is asserted; the serving loop itself runs in tests/e2e."""

from __future__ import annotations

import socket
import time
from collections.abc import Callable

import pytest
import serial

from console.errors import InputError
from console.sim.serve import PtyEnd, TcpEnd, parse_loopback


@pytest.mark.parametrize(
    ("text", "expected"),
    [("127.0.0.1:5757", ("127.0.0.1", 5757)), ("127.0.0.2:0", ("127.0.0.2", 0)), ("localhost:80", ("127.0.0.1", 80)),
     ("[::1]:5000", ("::1", 5000))],
)
def test_loopback_addresses_are_accepted(text: str, expected: tuple[str, int]) -> None:
    assert parse_loopback(text) == expected


@pytest.mark.parametrize("text", ["0.0.0.0:5757", "10.1.2.3:80", "example.org:80", "[::]:80", "127.0.0.1:65536",
                                  "127.0.0.1:-1", "127.0.0.1", ":5757"])
def test_anything_else_is_refused_with_one_line_naming_the_option(text: str) -> None:
    with pytest.raises(InputError) as raised:
        parse_loopback(text)
    message = str(raised.value)
    assert "\n" not in message and message.startswith("sim: --tcp = ") and "loopback" in message


def _read_all(port: serial.Serial) -> bytes:
    return port.read(1 << 16)


def test_pty_end_passes_bytes_both_ways_raw_and_never_blocks() -> None:
    end = PtyEnd()
    try:
        assert end.read() == b""
        end.write(b"nobody is listening\n")          # dropped: no console has the device open
        port = serial.serial_for_url(end.path, timeout=0)
        port.write(b"@1 W 1 +0.000 +0.000*DBB3\r\n")
        assert _wait(end.read) == b"@1 W 1 +0.000 +0.000*DBB3\r\n"   # raw: CR kept, nothing echoed back
        end.write(b"hello\n")
        assert _wait(lambda: _read_all(port)) == b"hello\n"
        for _ in range(2000):                         # ~200 kB the console never reads: writes must not block
            end.write(b"x" * 99 + b"\n")
        port.close()
        end.read()                                    # notices that the console left and drops what it left unread
        again = serial.serial_for_url(end.path, timeout=0)
        end.read()
        end.write(b"fresh\n")
        assert _wait(lambda: _read_all(again)) == b"fresh\n"
        again.close()
    finally:
        end.close()


def test_tcp_end_serves_one_client_at_a_time_on_loopback() -> None:
    end = TcpEnd("127.0.0.1", 0)
    try:
        assert end.url.startswith("socket://127.0.0.1:")
        port = int(end.url.rsplit(":", 1)[1])
        with socket.create_connection(("127.0.0.1", port)) as first:
            first.sendall(b"one\n")
            assert _wait(end.read) == b"one\n"
            end.write(b"to one\n")
            assert first.recv(100) == b"to one\n"
        with socket.create_connection(("127.0.0.1", port)) as second:
            second.sendall(b"two\n")
            assert _wait(end.read) == b"two\n"      # the first client's close was noticed, the second accepted
            end.write(b"to two\n")
            assert second.recv(100) == b"to two\n"
    finally:
        end.close()


def _wait(read: Callable[[], bytes | None], attempts: int = 2000) -> bytes:
    """Poll a non-blocking read until it returns something (bounded, so a bug cannot hang the suite)."""
    for _ in range(attempts):
        data = read()
        if data:
            return data
        time.sleep(0.001)
    return b""
