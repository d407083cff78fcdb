"""The device source (console/inputs/source.py) against a FIFO carrying `struct input_event` records, through the
real control loop on the virtual clock with the simulated robot: what reaches the loop in the cycle after each event.

Event codes are written out from the kernel's header (Linux, include/uapi/linux/input-event-codes.h), and the record
layout from include/uapi/linux/input.h (struct timeval, __u16 type, __u16 code, __s32 value): both public ABI.
"""

from __future__ import annotations

import os
import pickle
import struct
from collections.abc import Iterator
from dataclasses import dataclass
from pathlib import Path

import pytest

from console.core.safety import SafetyState, StopCause
from console.inputs.source import DeviceSource, InputStatus
from console.loop import ControlLoop, VirtualClock
from console.profile import Profile, load_profile
from console.sim.firmware import SimRobot
from console.transport import memory_pair
from shaping.shaper import StopKind

pytest.importorskip("evdev")

WREN = Path(__file__).resolve().parents[3] / "profiles" / "wren.toml"
INPUT_EVENT = struct.Struct("@llHHi")        # 64-bit Linux: 8 + 8 + 2 + 2 + 4 = 24 bytes
EV_SYN, EV_KEY, EV_ABS = 0x00, 0x01, 0x03
ABS_Y, ABS_RX = 0x01, 0x03
BTN_TL, BTN_TR, BTN_WEST, BTN_NORTH = 0x136, 0x137, 0x134, 0x133
KEY_UP, KEY_LEFT, KEY_X = 103, 105, 45
FULL_UP = -32768                             # a pad's "up" is its axis minimum (speed_axis_inverted = true)


def send(fd: int, *events: tuple[int, int, int]) -> None:
    """Records as the kernel writes them: each group closed by a SYN_REPORT."""
    records = [INPUT_EVENT.pack(1, 0, kind, code, value) for kind, code, value in events]
    os.write(fd, b"".join(records) + INPUT_EVENT.pack(1, 0, EV_SYN, 0, 0))


@dataclass
class Rig:
    profile: Profile
    loop: ControlLoop
    writer: int
    source: DeviceSource

    def send(self, *events: tuple[int, int, int]) -> None:
        send(self.writer, *events)

    def cycle(self, n: int = 1) -> None:
        self.loop.run_cycles(n)

    @property
    def v_req(self) -> float:
        return self.loop.snapshot().shaped.v_req_mps

    @property
    def status(self) -> InputStatus:
        status = self.loop.snapshot().source
        assert isinstance(status, InputStatus)
        return status

    def arm(self) -> None:
        self.loop.arm()
        self.cycle()
        assert self.loop.snapshot().state is SafetyState.ARMED


def make_rig(tmp_path: Path, kind: str = "gamepad") -> Iterator[Rig]:
    profile = load_profile(WREN)
    fifo = tmp_path / "pad"
    os.mkfifo(fifo)
    writer = os.open(fifo, os.O_RDWR)        # a writer before the reader: the source's open never waits
    source = DeviceSource(kind, str(fifo), profile)
    console_end, robot_end = memory_pair()
    loop = ControlLoop(profile, console_end, VirtualClock(), sim=SimRobot(profile, robot_end), url="sim",
                       source=pickle.loads(pickle.dumps(source)))     # as LoopProcess hands it to its child
    rig = Rig(profile, loop, writer, source)
    rig.cycle(30)                            # telemetry: arming needs a live link
    try:
        yield rig
    finally:
        if rig.writer >= 0:
            os.close(rig.writer)


@pytest.fixture
def rig(tmp_path: Path) -> Iterator[Rig]:
    yield from make_rig(tmp_path)


@pytest.fixture
def keys(tmp_path: Path) -> Iterator[Rig]:
    yield from make_rig(tmp_path, "keyboard")


def test_full_stick_with_the_button_held_asks_for_the_speed_setting_and_release_is_zero_in_the_same_cycle(
        rig: Rig) -> None:
    rig.arm()
    rig.send((EV_KEY, BTN_TL, 1))
    rig.cycle()
    rig.send((EV_ABS, ABS_Y, FULL_UP))
    rig.cycle()
    # issue 12's mapping: x = 1 at full stick (after inversion), y = (1 - e) + e = 1, v = y x 0.3 x top speed
    assert rig.v_req == pytest.approx(0.3 * rig.profile.envelope.top_speed_mps)
    assert rig.status.held and rig.status.speed == pytest.approx(1.0)
    rig.cycle(40)
    assert rig.loop.snapshot().shaped.v_mps > 0.0
    rig.send((EV_KEY, BTN_TL, 0))            # let go, stick still pushed
    rig.cycle()
    assert rig.v_req == 0.0
    assert not rig.status.held and "released" in rig.status.detail
    assert rig.loop.snapshot().state is SafetyState.ARMED     # letting go is no stop: no re-arming needed
    rig.send((EV_KEY, BTN_TL, 1))            # held again with the stick still pushed: zero until centred
    rig.cycle()
    assert rig.v_req == 0.0 and rig.status.centring
    rig.send((EV_ABS, ABS_Y, 0))
    rig.send((EV_ABS, ABS_Y, FULL_UP))
    rig.cycle()
    assert rig.v_req == pytest.approx(0.3 * rig.profile.envelope.top_speed_mps)


def test_nothing_is_asked_for_before_arming_and_an_off_centre_stick_at_arming_reads_zero(rig: Rig) -> None:
    rig.send((EV_KEY, BTN_TL, 1))
    rig.send((EV_ABS, ABS_Y, 0), (EV_ABS, ABS_Y, FULL_UP))
    rig.cycle(5)
    assert rig.v_req == 0.0 and rig.loop.snapshot().state is SafetyState.DISARMED
    rig.arm()
    rig.cycle(10)
    assert rig.v_req == 0.0 and rig.status.centring
    assert rig.loop.snapshot().shaped.v_mps == 0.0
    rig.send((EV_ABS, ABS_Y, 0))
    rig.cycle()
    rig.send((EV_ABS, ABS_Y, -16384))       # half up
    rig.cycle()
    assert rig.v_req > 0.0


def test_the_fast_stop_button_is_a_fast_stop_that_needs_re_arming(rig: Rig) -> None:
    rig.arm()
    rig.send((EV_KEY, BTN_TL, 1))
    rig.send((EV_ABS, ABS_Y, FULL_UP))
    rig.cycle(40)
    rig.send((EV_KEY, BTN_TR, 1))
    rig.cycle()
    snap = rig.loop.snapshot()
    assert snap.state is SafetyState.STOPPING and snap.cause is StopCause.OPERATOR
    assert rig.loop._core.safety.kind is StopKind.FAST
    rig.send((EV_KEY, BTN_TR, 0))
    rig.cycle(200)
    assert rig.loop.snapshot().state is SafetyState.STOPPED
    assert rig.loop.snapshot().shaped.v_mps == 0.0            # button and stick still held: still nothing moves
    rig.arm()
    rig.cycle(5)
    assert rig.v_req == 0.0                                    # the stick was held through arming: centre first


def test_the_device_going_away_is_a_fast_stop_input_lost_again_after_each_re_arming(rig: Rig) -> None:
    rig.arm()
    rig.send((EV_KEY, BTN_TL, 1))
    rig.send((EV_ABS, ABS_Y, FULL_UP))
    rig.cycle(40)
    os.close(rig.writer)                     # the FIFO's only writer closes it: the end of the device
    rig.writer = -1
    rig.cycle()
    snap = rig.loop.snapshot()
    assert snap.state is SafetyState.STOPPING and snap.cause is StopCause.INPUT_LOST
    assert rig.loop._core.safety.kind is StopKind.FAST and snap.shaped.v_req_mps == 0.0
    assert rig.status.lost == "end of file" and "input lost" in rig.status.detail and not rig.status.held
    rig.cycle(200)
    assert rig.loop.snapshot().state is SafetyState.STOPPED
    rig.loop.arm()
    rig.cycle(3)
    assert rig.loop.snapshot().state is not SafetyState.ARMED
    assert rig.loop.snapshot().cause is StopCause.INPUT_LOST


def test_a_device_that_cannot_be_opened_in_the_loop_is_input_lost_while_disarmed(tmp_path: Path) -> None:
    profile = load_profile(WREN)
    source = DeviceSource("gamepad", str(tmp_path / "gone"), profile)
    console_end, robot_end = memory_pair()
    loop = ControlLoop(profile, console_end, VirtualClock(), sim=SimRobot(profile, robot_end), url="sim",
                       source=source)
    loop.run_cycles(2)
    assert loop.snapshot().state is SafetyState.STOPPED and loop.snapshot().cause is StopCause.INPUT_LOST


def test_a_local_keyboard_drives_while_an_arrow_is_held_and_stops_on_release(keys: Rig) -> None:
    keys.arm()
    keys.send((EV_KEY, KEY_UP, 1))
    keys.cycle()
    assert keys.v_req == pytest.approx(0.3 * keys.profile.envelope.top_speed_mps)
    keys.send((EV_KEY, KEY_UP, 2), (EV_KEY, KEY_LEFT, 1))      # auto-repeat changes nothing; left adds a turn
    keys.cycle()
    snap = keys.loop.snapshot()
    assert snap.shaped.omega_req_radps == pytest.approx(0.3 * keys.profile.envelope.top_turn_rate_radps)
    keys.send((EV_KEY, KEY_UP, 0), (EV_KEY, KEY_LEFT, 0))
    keys.cycle()
    assert keys.v_req == 0.0 and keys.loop.snapshot().shaped.omega_req_radps == 0.0
    assert "released" in keys.status.detail
    keys.send((EV_KEY, KEY_X, 1))
    keys.cycle()
    assert keys.loop.snapshot().state is SafetyState.STOPPING


def test_the_speed_setting_buttons_change_what_full_stick_means(rig: Rig) -> None:
    rig.arm()
    rig.send((EV_KEY, BTN_NORTH, 1), (EV_KEY, BTN_NORTH, 0), (EV_KEY, BTN_NORTH, 1), (EV_KEY, BTN_NORTH, 0))
    rig.send((EV_KEY, BTN_TL, 1), (EV_ABS, ABS_Y, FULL_UP))
    rig.cycle()
    assert rig.status.setting == pytest.approx(0.5)
    assert rig.v_req == pytest.approx(0.5 * rig.profile.envelope.top_speed_mps)


def test_in_the_consoles_loop_process_the_pad_drives_and_its_end_is_input_lost(tmp_path: Path) -> None:
    """As `drive --input` runs it: the source pickled into the loop's child process, which opens the FIFO there."""
    from console.loop_process import LoopProcess
    from tests.console.test_loop_process import _armed, _wait

    profile = load_profile(WREN)
    fifo = tmp_path / "pad"
    os.mkfifo(fifo)
    writer = os.open(fifo, os.O_RDWR)
    proxy = LoopProcess(profile, url="sim", source=DeviceSource("gamepad", str(fifo), profile))
    try:
        _armed(proxy)
        send(writer, (EV_KEY, BTN_TL, 1), (EV_ABS, ABS_Y, FULL_UP))
        top = 0.3 * profile.envelope.top_speed_mps
        assert _wait(lambda: proxy.snapshot().shaped.v_req_mps == pytest.approx(top))
        assert _wait(lambda: getattr(proxy.snapshot().source, "held", False) is True)
        os.close(writer)
        writer = -1
        assert _wait(lambda: proxy.snapshot().cause is StopCause.INPUT_LOST)
        assert proxy.snapshot().shaped.v_req_mps == 0.0
    finally:
        proxy.close()
        if writer >= 0:
            os.close(writer)


def test_an_arrow_held_through_arming_counts_only_once_pressed_again(keys: Rig) -> None:
    keys.send((EV_KEY, KEY_UP, 1))
    keys.cycle(3)
    keys.arm()
    keys.send((EV_KEY, KEY_UP, 2))           # the kernel's auto-repeat of the held key: still nothing
    keys.cycle(5)
    assert keys.v_req == 0.0
    keys.send((EV_KEY, KEY_UP, 0), (EV_KEY, KEY_UP, 1))
    keys.cycle()
    assert keys.v_req == pytest.approx(0.3 * keys.profile.envelope.top_speed_mps)


@pytest.mark.skipif(not os.access("/dev/uinput", os.W_OK), reason="no /dev/uinput here: the FIFO tests stand in")
def test_a_virtual_gamepad_made_by_the_kernel_drives_and_its_removal_is_input_lost() -> None:
    """evdev's own virtual device (uinput): a real /dev/input/eventN node, its ranges read through the ioctls."""
    from evdev import AbsInfo, UInput

    from console.inputs.source import source_from_option

    stick = AbsInfo(value=0, min=-32768, max=32767, fuzz=0, flat=0, resolution=0)
    pad = UInput({EV_KEY: [BTN_TL, BTN_TR, BTN_WEST, BTN_NORTH], EV_ABS: [(ABS_Y, stick), (ABS_RX, stick)]},
                 name="diffdeck test pad (virtual)")
    profile = load_profile(WREN)
    try:
        source = source_from_option(f"gamepad:{pad.device.path}", profile)
        console_end, robot_end = memory_pair()
        loop = ControlLoop(profile, console_end, VirtualClock(), sim=SimRobot(profile, robot_end), url="sim",
                           source=source)
        loop.run_cycles(30)
        loop.arm()
        loop.run_cycles(1)
        pad.write(EV_KEY, BTN_TL, 1)
        pad.write(EV_ABS, ABS_Y, FULL_UP)
        pad.syn()
        loop.run_cycles(1)
        assert loop.snapshot().shaped.v_req_mps == pytest.approx(0.3 * profile.envelope.top_speed_mps)
        pad.write(EV_KEY, BTN_TL, 0)
        pad.syn()
        loop.run_cycles(1)
        assert loop.snapshot().shaped.v_req_mps == 0.0
    finally:
        pad.close()
    loop.run_cycles(1)
    assert loop.snapshot().cause is StopCause.INPUT_LOST
