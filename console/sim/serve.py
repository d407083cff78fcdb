"""Serve the simulated robot on the wall clock, on a pseudo-terminal or a loopback TCP port, like real firmware.

The robot end of a pty is its master side; a console opens the slave device path with pyserial as if it were a
USB-serial adapter. The TCP end listens on loopback only and serves one client at a time (pyserial's socket:// URL).
Neither end ever blocks the simulation: a console that is absent or does not read simply misses telemetry, exactly
as when nothing is plugged into a real robot's UART; the robot's watchdog stops the wheels when commands stop.

The serving loop wakes on deadlines t0 + k * WAKE_S (missed wake-ups are skipped, never bunched) and advances the
robot by exactly the wall time elapsed, in its own 1 ms sub-steps.
"""

from __future__ import annotations

import errno
import ipaddress
import os
import signal
import socket
import sys
import termios
import threading
import time
import tty
from types import FrameType

from console.errors import InputError
from console.profile import Profile
from console.sim.firmware import SimRobot

READ_CHUNK = 4096
WAKE_S = 0.002
"""Wall-clock period of the serving loop: each wake-up runs the 1 ms sub-steps that are due."""
MAX_CATCH_UP_S = 0.25
"""After a longer stall (process suspended) the sim skips ahead instead of replaying it in one burst."""


class PtyEnd:
    """Robot end of a pty pair (the master fd); consoles open `path`. Reads and writes never block."""

    def __init__(self) -> None:
        master, slave = os.openpty()
        tty.setraw(slave)   # no echo, no line editing, no CR/LF translation: bytes pass as they are
        self.path = os.ttyname(slave)
        self.url = self.path
        os.close(slave)     # only the console holds the slave; reading the master then tells whether one does
        os.set_blocking(master, False)
        self._master = master
        self._connected = False

    def read(self) -> bytes:
        try:
            data = os.read(self._master, READ_CHUNK)
        except BlockingIOError:
            self._connected = True
            return b""
        except OSError as error:
            if error.errno != errno.EIO:
                raise
            if self._connected:          # the console closed the device (or died): drop what it left unread
                self._connected = False
                self._discard_unread()
            return b""
        self._connected = True
        return data

    def write(self, data: bytes) -> None:
        if not self._connected:
            return                       # nobody has the device open: a real UART would send into the void too
        try:
            os.write(self._master, data)
        except BlockingIOError:
            pass                         # the console is not reading: this frame is lost, as on a full UART
        except OSError as error:
            if error.errno != errno.EIO:
                raise
            self._connected = False

    def _discard_unread(self) -> None:
        """Flush telemetry the last console never read, so the next one starts with fresh frames."""
        fd = os.open(self.path, os.O_RDWR | os.O_NOCTTY | os.O_NONBLOCK)
        try:
            termios.tcflush(fd, termios.TCIOFLUSH)
        finally:
            os.close(fd)

    def close(self) -> None:
        os.close(self._master)


def parse_loopback(text: str) -> tuple[str, int]:
    """"HOST:PORT" with a loopback host (127.x.x.x, ::1, localhost) and a port 0..65535 (0: any free port)."""
    allowed = "HOST:PORT with a loopback host (127.0.0.1, ::1 or localhost) and a port 0..65535"
    host, sep, port_text = text.rpartition(":")
    host = host.strip("[]")
    if not sep or not port_text.isdigit() or int(port_text) > 65535:
        raise InputError("sim", "--tcp", text, allowed)
    if host != "localhost":
        try:
            loopback = ipaddress.ip_address(host).is_loopback
        except ValueError:
            loopback = False
        if not loopback:
            raise InputError("sim", "--tcp", text, allowed + "; the simulated robot serves this machine only")
    return ("127.0.0.1" if host == "localhost" else host), int(port_text)


class TcpEnd:
    """Robot end on a loopback TCP port: one client at a time, the next one accepted when it leaves."""

    def __init__(self, host: str, port: int) -> None:
        family = socket.AF_INET6 if ":" in host else socket.AF_INET
        self._server = socket.socket(family, socket.SOCK_STREAM)
        self._server.setsockopt(socket.SOL_SOCKET, socket.SO_REUSEADDR, 1)
        self._server.bind((host, port))
        self._server.listen(1)
        self._server.setblocking(False)
        bound_host, bound_port = self._server.getsockname()[:2]
        self.url = f"socket://{bound_host}:{bound_port}" if family == socket.AF_INET else \
            f"socket://[{bound_host}]:{bound_port}"
        self._client: socket.socket | None = None

    def read(self) -> bytes:
        if self._client is None:
            try:
                self._client, _ = self._server.accept()
            except BlockingIOError:
                return b""
            self._client.setblocking(False)
            self._client.setsockopt(socket.IPPROTO_TCP, socket.TCP_NODELAY, 1)
        try:
            data = self._client.recv(READ_CHUNK)
        except BlockingIOError:
            return b""
        except OSError:
            data = b""
        if not data:                     # orderly close or reset: wait for the next client
            self._drop()
        return data

    def write(self, data: bytes) -> None:
        if self._client is None:
            return
        try:
            self._client.send(data)
        except BlockingIOError:
            pass                         # the client is not reading: this frame is lost
        except OSError:
            self._drop()

    def _drop(self) -> None:
        if self._client is not None:
            self._client.close()
            self._client = None

    def close(self) -> None:
        self._drop()
        self._server.close()


def run_wall_clock(robot: SimRobot, stop: threading.Event) -> None:
    """Advance the robot with the wall clock until `stop` is set (deadline scheduling, no drift, no bunching)."""
    clock = time.monotonic
    t0 = clock()
    offset = 0.0          # sim time skipped after long stalls
    k = 0
    while not stop.is_set():
        k += 1
        delay = t0 + k * WAKE_S - clock()
        if delay > 0.0:
            stop.wait(delay)
        now = clock() - t0
        k = max(k, int(now / WAKE_S))        # missed wake-ups are skipped
        behind = now - offset - robot.t_s
        if behind > MAX_CATCH_UP_S:
            offset += behind - WAKE_S
            behind = WAKE_S
        if behind > 0.0:
            robot.advance(behind)


def serve(profile: Profile, end: PtyEnd | TcpEnd, first_line: str) -> int:
    """Print `first_line` (flushed) and serve until SIGINT or SIGTERM; exit code 0. Closes `end` in any case."""
    stop = threading.Event()

    def on_signal(_signum: int, _frame: FrameType | None) -> None:
        stop.set()

    previous = {sig: signal.signal(sig, on_signal) for sig in (signal.SIGINT, signal.SIGTERM)}
    try:
        robot = SimRobot(profile, end)   # a profile the robot cannot speak fails here, before anything is printed
        print(first_line, flush=True)
        print(f"diffdeck sim: {profile.name} on {end.url}; Ctrl-C or SIGTERM stops it", file=sys.stderr, flush=True)
        run_wall_clock(robot, stop)
    finally:
        for sig, handler in previous.items():
            signal.signal(sig, handler)
        end.close()
    return 0
