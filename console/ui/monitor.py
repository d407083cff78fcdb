"""The raw frame monitor (key f): the link's last frames both ways, decoded and raw, with every line the codec had to
throw away (CRC error, malformed, unknown, overlong, noise) highlighted; p pauses it.

The bytes come from the runner's ring of reads and writes (`LoopHandle.wire_since`, console.session): the loop only
keeps them, and only what the monitor asks for crosses to this process, once per screen refresh while it is open.
Splitting into lines and decoding happen here, with a codec of the profile's own kind (console.core.codec) per
direction, so the loop's timing and its codec's counters are untouched.
"""

from __future__ import annotations

from collections import deque
from dataclasses import dataclass, fields, is_dataclass
from typing import TYPE_CHECKING

from textual.app import ComposeResult
from textual.binding import Binding

from console.core.codec import DecoderCounts, make_codec
from console.ui.rows import Rows
from console.ui.screens import Overlay
from console.ui.widgets import Panel

if TYPE_CHECKING:
    from console.profile import LinkConfig
    from console.session import LoopHandle, WireChunk

LINES_KEPT = 400
PENDING_MAX = 512
"""Bytes of an unfinished line kept per direction; a longer one is shown as it is (no line end in sight)."""
VERDICTS = {"crc_errors": "CRC", "malformed": "BAD", "unknown_frames": "UNK", "overlong_lines": "LONG",
            "noise_bytes": "NOISE"}
"""The codec counter a line raised -> the word the monitor shows (one per line, the first that rose)."""


@dataclass(frozen=True, slots=True)
class FrameLine:
    t_s: float
    sent: bool
    raw: bytes
    decoded: str          # the frame(s) the codec read from the line, "" when none
    verdict: str          # "ok", "" (a sent line the codec does not read back), or one of VERDICTS' words

    @property
    def bad(self) -> bool:
        return self.verdict not in ("ok", "")


def describe(frame: object) -> str:
    """A decoded frame as `Type field=value ...` (every dataclass field, so nothing is hidden)."""
    names = [f.name for f in fields(frame)] if is_dataclass(frame) else []
    return " ".join([type(frame).__name__, *(f"{name}={getattr(frame, name)}" for name in names)])


class FrameSplitter:
    """Chunks (as read and written) -> classified lines, per direction, each line through its direction's codec."""

    def __init__(self, link: LinkConfig, keep: int = LINES_KEPT) -> None:
        self.lines: deque[FrameLine] = deque(maxlen=keep)
        self.last_n = 0
        self.bad = 0
        self._codecs = {True: make_codec(link), False: make_codec(link)}
        self._pending = {True: b"", False: b""}

    def add(self, chunks: tuple[WireChunk, ...]) -> int:
        """Take the chunks not seen yet; returns how many lines were added."""
        added = 0
        for chunk in chunks:
            if chunk.n <= self.last_n:
                continue
            self.last_n = chunk.n
            *complete, rest = (self._pending[chunk.sent] + chunk.data).split(b"\n")
            if len(rest) > PENDING_MAX:
                complete.append(rest)
                rest = b""
            self._pending[chunk.sent] = rest
            for raw in complete:
                self.lines.append(self._classify(chunk.t_s, chunk.sent, raw))
                added += 1
        return added

    def _classify(self, t_s: float, sent: bool, raw: bytes) -> FrameLine:
        codec = self._codecs[sent]
        counts = DecoderCounts.of(codec)
        frames = codec.feed(raw + b"\n")
        after = DecoderCounts.of(codec)
        rose = next((name for name in VERDICTS if getattr(after, name) > getattr(counts, name)), None)
        decoded = " · ".join(describe(frame) for frame in frames)
        if sent:
            verdict = "ok" if frames else ""      # our own encoder wrote it; a template codec reads no commands
        elif rose is not None and not (rose == "noise_bytes" and frames):
            verdict = VERDICTS[rose]
        else:
            verdict = "ok" if frames else VERDICTS["malformed"]
        if verdict not in ("ok", ""):
            self.bad += 1
        return FrameLine(t_s, sent, raw, decoded, verdict)


def _printable(raw: bytes) -> str:
    """The bytes as a person can read them on one line: ASCII as is, the rest escaped (\\r, \\x00 ...)."""
    return raw.decode("ascii", "backslashreplace").replace("\r", "\\r").replace("\t", "\\t")


class FrameList(Panel):
    """The newest frame lines that fit, newest at the bottom: time, direction, verdict, decoded, raw."""

    COMPONENT_CLASSES = {"frame--bad", "frame--tx", "frame--rx", "frame--raw"}

    def __init__(self, *, id: str | None = None) -> None:
        super().__init__(id=id)
        self.lines: tuple[FrameLine, ...] = ()

    def show(self, lines: tuple[FrameLine, ...], version: int) -> None:
        self.lines = lines
        self._update((version,))

    def paint(self, width: int, height: int) -> Rows:
        text = Rows()
        two_rows = width < 100                    # narrow: the raw line goes beneath its decoding
        per = 2 if two_rows else 1
        shown = list(self.lines)[-max(height // per, 1):]
        for i, line in enumerate(shown):
            bad = self.style_of("frame--bad")
            text.append(f"{line.t_s:8.2f} ", "dim")
            text.append("tx → " if line.sent else "rx ← ", self.style_of("frame--tx" if line.sent else "frame--rx"))
            text.append(f"{line.verdict or '·':<5} ", bad if line.bad else "dim")
            raw = _printable(line.raw)
            if two_rows:
                text.append(line.decoded or "(not decoded)")
                text.append("\n" + " " * 20)
                text.append(raw, bad if line.bad else self.style_of("frame--raw"))
            else:                                 # raw first: it is what a firmware author compares
                text.append(f"{raw:<46} ", bad if line.bad else self.style_of("frame--raw"))
                text.append(line.decoded or "(not decoded)")
            if i < len(shown) - 1:
                text.append("\n")
        return text


class MonitorScreen(Overlay[None]):
    """The frame monitor overlay; the app's tick calls `pull` with the loop handle."""

    BINDINGS = [
        Binding("escape,f", "dismiss", "close"),
        Binding("p", "pause", "pause"),
    ]
    close_key = ("p / esc", "pause / close")

    def __init__(self, link: LinkConfig) -> None:
        super().__init__(id="monitor")
        self.splitter = FrameSplitter(link)
        self.paused = False
        self._version = 0

    def body(self) -> ComposeResult:
        frames = FrameList(id="frames")
        frames.border_title = "frames, newest at the bottom"
        yield frames

    def on_mount(self) -> None:
        super().on_mount()
        self._retitle()

    def action_pause(self) -> None:
        self.paused = not self.paused
        self._retitle()

    def _retitle(self) -> None:
        frames = self.query_one(FrameList)
        state = "PAUSED (p resumes)" if self.paused else "live (p pauses)"
        frames.border_subtitle = f"{state} · discarded lines seen: {self.splitter.bad}"

    def pull(self, loop: LoopHandle) -> None:
        """Newer chunks from the loop, unless paused (the loop's ring moves on meanwhile)."""
        if self.paused or not self.is_mounted:
            return
        if self.splitter.add(loop.wire_since(self.splitter.last_n)):
            self._version += 1
            self.query_one(FrameList).show(tuple(self.splitter.lines), self._version)
            self._retitle()
