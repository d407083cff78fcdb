"""Links through real pyserial URL handlers (loop://, socket://, a pty) and the in-memory pair."""

from __future__ import annotations

import os
import socket
import threading

import pytest
import serial
import serial.rfc2217

from console.errors import InputError, LinkLost, LinkOpenError
from console.protocol import Decoder, Heartbeat, Telemetry, WheelCommand, encode
from console.transport import memory_pair, open_url


def read_until(transport, n: int, tries: int = 2000) -> bytes:
    """Poll the non-blocking read until n bytes came (bounded by tries, each waiting on a short socket/pty select)."""
    got = b""
    for _ in range(tries):
        got += transport.read()
        if len(got) >= n:
            return got
        threading.Event().wait(0.001)
    return got


def test_loop_url_round_trip_through_pyserial():
    link = open_url("loop://", 115200)
    try:
        assert link.read() == b""            # non-blocking when nothing is there
        frames = [WheelCommand(i, i * 0.5, -i * 0.25) for i in range(50)]
        for frame in frames:               # one frame per write, as the control loop sends them
            link.write(encode(frame))
        assert Decoder().feed(read_until(link, sum(len(encode(f)) for f in frames))) == frames
    finally:
        link.close()


@pytest.fixture
def tcp_server():
    """A one-client echo-free server on 127.0.0.1 at an ephemeral port: the robot side of a TCP serial bridge."""
    server = socket.create_server(("127.0.0.1", 0))
    accepted: list[socket.socket] = []
    ready = threading.Event()

    def accept() -> None:
        conn, _ = server.accept()
        accepted.append(conn)
        ready.set()

    thread = threading.Thread(target=accept, daemon=True)
    thread.start()
    yield server.getsockname()[1], accepted, ready
    for conn in accepted:
        conn.close()
    server.close()


def test_socket_url_round_trip(tcp_server):
    port, accepted, ready = tcp_server
    link = open_url(f"socket://127.0.0.1:{port}", 115200)
    try:
        assert ready.wait(5)
        robot = accepted[0]
        link.write(encode(Heartbeat(3)))
        data = b""
        while not data.endswith(b"\n"):
            data += robot.recv(100)
        assert Decoder().feed(data) == [Heartbeat(3)]
        reply = Telemetry(1, 3, 0.0, 0.0, 0, 0, 24.0, 4)
        robot.sendall(encode(reply))
        assert Decoder().feed(read_until(link, len(encode(reply)))) == [reply]
        robot.close()          # the bridge resets
        with pytest.raises(LinkLost) as lost:
            read_until(link, 1)
        assert f"socket://127.0.0.1:{port}" in str(lost.value) and "\n" not in str(lost.value)
    finally:
        link.close()


def test_closed_pty_gives_link_lost():
    master, slave = os.openpty()
    path = os.ttyname(slave)
    link = open_url(path, 115200)
    try:
        os.write(master, encode(Heartbeat(1)))
        assert Decoder().feed(read_until(link, len(encode(Heartbeat(1))))) == [Heartbeat(1)]
        os.close(master)       # the other side of the pty goes away
        with pytest.raises(LinkLost) as lost:
            read_until(link, 1)
        message = str(lost.value)
        assert message.startswith(f"link lost: {path}: ") and "\n" not in message
        with pytest.raises(LinkLost):
            link.write(b"x\n")
    finally:
        link.close()
        os.close(slave)


def test_missing_device_cannot_be_opened_naming_it():
    with pytest.raises(LinkOpenError) as lost:
        open_url("/dev/diffdeck-no-such-port", 115200)
    assert str(lost.value) == ("cannot open the link /dev/diffdeck-no-such-port: No such file or directory; "
                               "nothing was sent")
    assert lost.value.exit_code == 5


@pytest.mark.parametrize("url", ["socket://127.0.0.1:99999", "socket://127.0.0.1", "socket://", "socket://:80",
                                 "rfc2217://host", " ", "ttyUSB0", "/dev/tty USB0"])
def test_malformed_urls_are_bad_input(url: str) -> None:
    with pytest.raises(InputError) as bad:
        open_url(url, 115200)
    assert bad.value.exit_code == 2 and bad.value.key == "url"


def test_unknown_url_scheme_is_input_error():
    with pytest.raises(InputError) as bad:
        open_url("nosuchscheme://x", 115200)
    assert "url" in str(bad.value) and "nosuchscheme://x" in str(bad.value)


def test_memory_pair_carries_bytes_both_ways():
    console, robot = memory_pair()
    assert console.read() == b"" and robot.read() == b""
    console.write(b"abc")
    console.write(b"def")
    assert robot.read() == b"abcdef" and robot.read() == b""
    robot.write(b"xyz")
    assert console.read() == b"xyz"


@pytest.mark.parametrize("closing", ["console", "robot"])
def test_memory_pair_close_is_link_lost_on_the_other_end(closing):
    console, robot = memory_pair()
    ends = {"console": console, "robot": robot}
    ends[closing].close()
    other = robot if closing == "console" else console
    for action in (other.read, lambda: other.write(b"x")):
        with pytest.raises(LinkLost) as lost:
            action()
        assert f"closed by the {closing} end" in str(lost.value)


def test_memory_pair_is_thread_safe():
    console, robot = memory_pair()
    chunk = bytes(range(256))
    writers = [threading.Thread(target=lambda: [console.write(chunk) for _ in range(200)]) for _ in range(4)]
    got = bytearray()
    for w in writers:
        w.start()
    while any(w.is_alive() for w in writers):
        got += robot.read()
    for w in writers:
        w.join()
    got += robot.read()
    assert len(got) == 4 * 200 * 256
    # writes are atomic: every chunk arrives whole
    assert all(got[i:i + 256] == chunk for i in range(0, len(got), 256))


def test_memory_pair_bounded():
    console, robot = memory_pair()
    with pytest.raises(LinkLost):
        for _ in range(10_000):
            console.write(b"x" * 1024)


def test_write_that_cannot_drain_is_link_lost():
    # loop:// models the line rate: 2000 bytes at 9600 baud take about 2 s (10 bits per byte, 8N1), far beyond the
    # write timeout, so the port would block the control loop: that is reported as a lost link.
    link = open_url("loop://", 9600)
    try:
        with pytest.raises(LinkLost) as lost:
            link.write(b"x" * 2000)
        assert "write blocked" in str(lost.value) and "loop://" in str(lost.value)
    finally:
        link.close()


@pytest.fixture
def rfc2217_bridge():
    """An RFC 2217 serial bridge on 127.0.0.1: pyserial's own server side (PortManager) in front of a loop:// port,
    so whatever the client writes comes back. Yields (port, stop): setting `stop` makes the bridge hang up."""
    server = socket.create_server(("127.0.0.1", 0))
    stop = threading.Event()

    def serve() -> None:
        conn, _ = server.accept()
        conn.settimeout(0.01)
        loop = serial.serial_for_url("loop://", timeout=0)

        class Sender:
            write = conn.sendall

        manager = serial.rfc2217.PortManager(loop, Sender())
        while not stop.is_set():
            try:
                data = conn.recv(1024)
                if not data:
                    break
                loop.write(b"".join(manager.filter(data)))
            except socket.timeout:
                pass
            echoed = loop.read(1024)
            if echoed:
                conn.sendall(b"".join(manager.escape(echoed)))
        conn.close()

    thread = threading.Thread(target=serve, daemon=True)
    thread.start()
    yield server.getsockname()[1], stop
    stop.set()
    thread.join(2)
    server.close()


@pytest.mark.filterwarnings("ignore:set(Daemon|Name)\\(\\) is deprecated:DeprecationWarning")   # inside pyserial 3.5
def test_rfc2217_url_round_trip_and_hang_up(rfc2217_bridge):
    port, stop = rfc2217_bridge
    url = f"rfc2217://127.0.0.1:{port}"
    link = open_url(url, 115200)
    try:
        frames = [Heartbeat(5), WheelCommand(6, 1.5, -1.5)]
        for frame in frames:
            link.write(encode(frame))
        assert Decoder().feed(read_until(link, sum(len(encode(f)) for f in frames))) == frames
        stop.set()             # the bridge hangs up
        with pytest.raises(LinkLost) as lost:
            for _ in range(2000):
                link.read()
                link.write(encode(Heartbeat(7)))
                threading.Event().wait(0.001)
        assert str(lost.value).startswith(f"link lost: {url}: ") and "\n" not in str(lost.value)
    finally:
        link.close()
