"""The link monitor: what the console knows about the link and how fresh it is.

Sequence numbers (ours, echoed back; the robot's own) wrap at 16 bits and are compared with serial-number arithmetic
(`console.core.seqnum`, RFC 1982). Whether telemetry answers the release frame (so its flags are current, not latched
from before arming) is decided once per arming and then held: a fixed arming number compared with later echoes
would flip back to "before" every 32,768 frames.
"""

from __future__ import annotations

from dataclasses import dataclass

from console.core import seqnum
from console.core.codec import Codec, DecoderCounts
from console.protocol import Telemetry


@dataclass(frozen=True, slots=True)
class LinkStats:
    url: str
    rate_hz: float                  # frames sent per second, measured
    rtt_s: float | None             # last command -> its echo in telemetry (includes the robot's telemetry interval)
    decoder: DecoderCounts          # what the codec threw away (crc, overlong, unknown, malformed, noise bytes)
    telemetry_age_s: float | None   # since the last valid telemetry (None: none yet)
    frames_sent: int
    telemetry_received: int
    telemetry_gaps: int = 0         # robot telemetry frames missing by its own sequence numbers
    lost: str | None = None         # why the link counts as lost (None: live)


class LinkMonitor:
    """Telemetry freshness, echoes and round trip, gaps in the robot's numbering, port loss; no clock of its own."""

    def __init__(self, url: str, telemetry_timeout_s: float, opened_t: float = 0.0) -> None:
        self.url = url
        self.timeout_s = telemetry_timeout_s
        self.opened_t = opened_t                # telemetry is overdue from here until the first frame
        self.port_gone: str | None = None
        self.stale = False
        self.last_telemetry_t: float | None = None
        self.rtt_s: float | None = None
        self.frames_sent = 0
        self.telemetry_received = 0
        self.telemetry_gaps = 0
        self._robot_seq: int | None = None
        self._sent_at: list[float | None] = [None] * seqnum.MODULUS
        self._release: int | None = None        # our seq of the release frame of the current arming
        self._released = False                  # a telemetry frame has echoed the release frame (or a later one)
        self._release_t = 0.0

    @property
    def lost(self) -> str | None:
        """Why the link counts as lost now, or None."""
        if self.port_gone is not None:
            return self.port_gone
        if self.stale:
            return f"no valid telemetry for {self.timeout_s:g} s"
        return None

    @property
    def live(self) -> bool:
        return self.lost is None and self.last_telemetry_t is not None

    def sent(self, seq: int, t: float) -> None:
        self._sent_at[seq] = t
        self.frames_sent += 1

    def release_sent(self, seq: int, t: float) -> None:
        """The release frame of a new arming goes out with `seq`: flags count again only once it is answered."""
        self._release, self._released, self._release_t = seq, False, t

    def telemetry(self, t: float, frame: Telemetry) -> str | None:
        """Take one telemetry frame; returns a link event text (first telemetry, link back) or None."""
        self.telemetry_received += 1
        event = None
        if self.last_telemetry_t is None:
            event = "link up: first telemetry"
        elif self.stale:
            event = "link back: telemetry again"
        self.last_telemetry_t = t
        self.stale = False
        if frame.seq is not None:
            if self._robot_seq is not None:
                step = seqnum.distance(frame.seq, self._robot_seq)
                if 1 < step < seqnum.MODULUS // 2:
                    self.telemetry_gaps += step - 1
            self._robot_seq = frame.seq
        echo = frame.echo_seq
        if echo is not None:
            sent = self._sent_at[echo]
            if sent is not None:
                self.rtt_s = t - sent
            if self._release is not None and not self._released \
                    and (echo == self._release or seqnum.is_after(echo, self._release)):
                self._released = True
        return event

    def flags_current(self, t: float, frame: Telemetry) -> bool:
        """The frame's flags describe the robot since the release frame (not a latch from before arming).

        With an echo: once any telemetry echoed the release frame or a later one (held until the next arming).
        Without an echo (some templates): from one telemetry timeout after the release frame.
        """
        if frame.echo_seq is not None:
            return self._released
        return t - self._release_t >= self.timeout_s

    def check(self, t: float) -> str | None:
        """Mark the link stale when telemetry is overdue; returns the event text the moment it happens."""
        if self.port_gone is not None or self.stale:
            return None
        age = t - (self.last_telemetry_t if self.last_telemetry_t is not None else self.opened_t)
        if age > self.timeout_s:
            self.stale = True
            return f"link lost: no valid telemetry for {self.timeout_s:g} s"
        return None

    def stats(self, t: float, rate_hz: float, codec: Codec) -> LinkStats:
        age = None if self.last_telemetry_t is None else t - self.last_telemetry_t
        return LinkStats(self.url, rate_hz, self.rtt_s, DecoderCounts.of(codec), age, self.frames_sent,
                         self.telemetry_received, self.telemetry_gaps, self.lost)
