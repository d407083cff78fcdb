"""The non-blocking device reader (console/inputs/device.py) on a pipe carrying `struct input_event` records
(include/uapi/linux/input.h; codes from include/uapi/linux/input-event-codes.h)."""

from __future__ import annotations

import os
import struct
from collections.abc import Iterator

import pytest

from console.inputs.device import READS_PER_CALL, DeviceGone, EventDecoder, read_available

pytest.importorskip("evdev")

INPUT_EVENT = struct.Struct("@llHHi")
EV_SYN, EV_KEY, EV_ABS, ABS_Y, BTN_TL = 0x00, 0x01, 0x03, 0x01, 0x136


@pytest.fixture
def pipe() -> Iterator[tuple[int, int]]:
    read_end, write_end = os.pipe()
    os.set_blocking(read_end, False)
    yield read_end, write_end
    for fd in (read_end, write_end):
        try:
            os.close(fd)
        except OSError:
            pass


def test_nothing_waiting_is_no_events_and_a_record_split_across_reads_comes_whole(pipe: tuple[int, int]) -> None:
    read_end, write_end = pipe
    decoder = EventDecoder()
    assert read_available(read_end, decoder) == []
    record = INPUT_EVENT.pack(12, 500000, EV_ABS, ABS_Y, -1234)
    os.write(write_end, record[:10])
    assert read_available(read_end, decoder) == []
    os.write(write_end, record[10:] + INPUT_EVENT.pack(12, 500000, EV_SYN, 0, 0)
             + INPUT_EVENT.pack(13, 0, EV_KEY, BTN_TL, 1))
    events = read_available(read_end, decoder)
    assert [(e.type, e.code, e.value) for e in events] == [("EV_ABS", "ABS_Y", -1234), ("EV_KEY", "BTN_TL", 1)]
    assert events[0].t_s == pytest.approx(12.5)


def test_the_writer_closing_is_the_device_gone(pipe: tuple[int, int]) -> None:
    read_end, write_end = pipe
    os.write(write_end, INPUT_EVENT.pack(0, 0, EV_KEY, BTN_TL, 1))
    os.close(write_end)
    decoder = EventDecoder()
    with pytest.raises(DeviceGone, match="end of file"):
        read_available(read_end, decoder)


def test_a_flood_is_read_in_bounded_slices(pipe: tuple[int, int]) -> None:
    read_end, write_end = pipe
    flood = INPUT_EVENT.pack(0, 0, EV_ABS, ABS_Y, 7) * (READS_PER_CALL * 64 + 10)
    os.set_blocking(write_end, False)
    written = os.write(write_end, flood)            # a pipe holds 64 KiB by default: more than one call reads
    decoder = EventDecoder()
    first = read_available(read_end, decoder)
    assert len(first) == min(written // INPUT_EVENT.size, READS_PER_CALL * 64)
    assert len(first) + len(read_available(read_end, decoder)) == written // INPUT_EVENT.size
