"""Finding 6 of issue 9: every telemetry flag reaches the recording, and the decoder's discard counters reach the
snapshot and the sidecar (a run with a fifth of its telemetry corrupted used to end "link lost" with every shown
counter at 0)."""

from __future__ import annotations

import json
import random
from pathlib import Path

from console.core.safety import StopCause
from console.protocol import Flags
from console.record import read_csv, sidecar_path
from tests.console.test_loop import Rig


def test_flags_are_recorded_by_bit(tmp_path: Path) -> None:
    record = tmp_path / "flags.csv"
    rig = Rig(recorder_path=record)
    rig.armed_at(0.3, settle_s=1.0)
    rig.sim.set_estop(True)
    rig.run(0.5)
    assert rig.loop.snapshot().cause is StopCause.ESTOP
    rig.loop.close()
    rig.recorder.close(rig.loop.stats(), rig.loop.link_stats())
    flags = read_csv(record)["flags"].astype(int)
    assert flags[0] == 0 or flags[0] & Flags.STOPPED          # power-up: STOPPED until released
    assert (flags & Flags.ESTOP).any() and (flags & Flags.POWER_OFF).any()
    assert not (flags[: len(flags) // 2] & Flags.ESTOP).any()  # not before it was opened


class Corrupting:
    """Flips one byte in a fifth of the received lines (a noisy cable), and adds noise bytes between lines."""

    def __init__(self, rig: Rig) -> None:
        self.inner, self.rng = rig.tap.read, random.Random(9)

    def read(self) -> bytes:
        data = bytearray(self.inner())
        lines = bytes(data).split(b"\n")
        for i, line in enumerate(lines):
            if len(line) > 10 and self.rng.random() < 0.2:
                spoiled = bytearray(line)
                spoiled[self.rng.randrange(4, len(line) - 6)] ^= 0x01
                lines[i] = bytes(spoiled) + (b"~~" if self.rng.random() < 0.5 else b"")
        return b"\n".join(lines)


def test_decoder_counters_reach_the_snapshot_and_the_sidecar(tmp_path: Path) -> None:
    record = tmp_path / "noisy.csv"
    rig = Rig(recorder_path=record)
    rig.tap.read = Corrupting(rig).read
    rig.run(3.0)
    decoder = rig.loop.snapshot().link.decoder
    assert decoder.crc_errors + decoder.malformed > 0 and decoder.total > 0
    rig.loop.close()
    rig.recorder.close(rig.loop.stats(), rig.loop.link_stats())
    link = json.loads(sidecar_path(record).read_text(encoding="utf-8"))["link"]
    assert link["decoder"]["crc_errors"] == decoder.crc_errors and link["decoder"]["malformed"] == decoder.malformed
    assert link["decoder"]["noise_bytes"] == decoder.noise_bytes
