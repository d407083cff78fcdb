"""Key-to-wire instrumentation for the console benchmark (env DIFFDECK_TRACE_FILE=PATH).

The app notes when each key arrived; a thin wrapper around the transport notes when a wheel-command frame whose
rates differ from the previous one was handed to the link. Both use `time.perf_counter` (CLOCK_MONOTONIC on Linux,
shared by every process), so a benchmark can also compare them with the moment it sent the key through tmux.
Recording is a list append on the loop thread; the file is written once, when the console closes.
"""

from __future__ import annotations

import json
import os
import threading
import time
from pathlib import Path
from typing import Any

from console.transport import Transport

TRACE_ENV = "DIFFDECK_TRACE_FILE"


class KeyWireTrace:
    def __init__(self, path: str | Path) -> None:
        self.path = Path(path)
        self.keys: list[tuple[float, str]] = []
        self.wire: list[tuple[float, str]] = []
        self._last_rates: bytes | None = None
        self._lock = threading.Lock()

    @staticmethod
    def from_env() -> KeyWireTrace | None:
        path = os.environ.get(TRACE_ENV)
        return KeyWireTrace(path) if path else None

    def key(self, name: str) -> None:
        with self._lock:
            self.keys.append((time.perf_counter(), name))

    def written(self, data: bytes) -> None:
        """Called after each transport write: keep the first frame of every new pair of wheel rates."""
        now = time.perf_counter()
        for line in data.split(b"\n"):
            fields = line.split(b"*", 1)[0].split(b" ")
            if len(fields) == 5 and fields[1] == b"W":           # @1 W seq left right
                rates = fields[3] + b" " + fields[4]
                if rates != self._last_rates:
                    self._last_rates = rates
                    with self._lock:
                        self.wire.append((now, rates.decode("ascii")))

    def wrap(self, transport: Transport) -> TracedTransport:
        return TracedTransport(transport, self)

    def save(self, extra: dict[str, Any]) -> None:
        with self._lock:
            document = {"keys": self.keys, "wire": self.wire, **extra}
        self.path.write_text(json.dumps(document))


class TracedTransport:
    """The same link, with every write reported to the trace."""

    def __init__(self, inner: Transport, trace: KeyWireTrace) -> None:
        self.inner = inner
        self.trace = trace
        self.url = inner.url

    def write(self, data: bytes) -> None:
        self.inner.write(data)
        self.trace.written(data)

    def read(self) -> bytes:
        return self.inner.read()

    def close(self) -> None:
        self.inner.close()
