"""The surface the loop core needs from a wire codec: the diffdeck protocol (`console.protocol.Codec`) and the
firmware templates (`console.templates.TemplateCodec`) both implement it. A new wire protocol is one class with this
surface plus one line in `make_codec` (see DEVELOPERS.md)."""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass, fields
from typing import TYPE_CHECKING, Protocol

if TYPE_CHECKING:
    from console.profile import LinkConfig
    from console.protocol import Frame, Heartbeat, StopCommand, WheelCommand


class Codec(Protocol):
    """Frames to bytes and bytes to frames, never raising on input; counts what it had to throw away."""

    crc_errors: int          # trailer did not match (0 for codecs without a checksum)
    overlong_lines: int      # no line end within the line length
    unknown_frames: int      # a valid line of a kind this console does not know
    malformed: int           # a line of a known kind whose fields do not follow its grammar
    noise_bytes: int         # bytes outside any frame (boot messages, wrong baud rate)

    def encode(self, frame: WheelCommand | StopCommand | Heartbeat) -> bytes: ...   # b"": nothing to send

    def feed(self, data: bytes) -> Sequence[Frame]: ...


@dataclass(frozen=True, slots=True)
class DecoderCounts:
    """The codec's discard counters at one moment (cumulative since the link opened)."""

    crc_errors: int = 0
    overlong_lines: int = 0
    unknown_frames: int = 0
    malformed: int = 0
    noise_bytes: int = 0

    @classmethod
    def of(cls, codec: Codec) -> DecoderCounts:
        return cls(*(getattr(codec, f.name) for f in fields(cls)))

    @property
    def total(self) -> int:
        """Everything discarded, lines and noise bytes together (non-zero: something on the link is wrong)."""
        return self.crc_errors + self.overlong_lines + self.unknown_frames + self.malformed + self.noise_bytes


def make_codec(link: LinkConfig) -> Codec:
    """The frame codec the profile's link asks for (diffdeck protocol or the firmware's template)."""
    if link.protocol == "template" and link.template is not None:
        from console.templates import TemplateCodec

        return TemplateCodec(link.template)
    from console.protocol import Codec as DiffdeckCodec

    return DiffdeckCodec()
