"""Finding 1 of issue 9: the robot's WATCHDOG, FAULT and ESTOP flags must stop the console however long it has been
armed. The console's sequence numbers wrap every 65,536 frames; a half-range test against a fixed arming number went
blind for 32,768 frames of every 65,536. Here the loop runs 100,000 frames (past one wrap and into the blind half of
the old test) on the virtual clock before each flag is injected; each must stop at once and need a new arming.
"""

from __future__ import annotations

from console.core.safety import SafetyState, StopCause
from console.protocol import Flags, StopCommand, WheelCommand
from tests.console.test_loop import Rig

FRAMES = 100_000


def _stopped_at_once(rig: Rig, cause: StopCause, sent_before: int) -> None:
    telemetry_period = 1.0 / rig.profile.sim.telemetry_rate_hz
    rig.run(3 * telemetry_period + 2.0 / rig.rate)                 # the next telemetry frames carry the flag
    snapshot = rig.loop.snapshot()
    assert snapshot.state in (SafetyState.STOPPING, SafetyState.STOPPED) and snapshot.cause is cause
    rig.run_until(SafetyState.STOPPED, limit_s=1.0)
    assert type(rig.tap.sent[-1]) is StopCommand and rig.tap.sent[-1].category == 0   # immediate: category 0
    rig.loop.request(0.4, 0.0)                                     # no new arming: nothing but stop frames
    n = len(rig.tap.sent)
    rig.run(0.5)
    assert all(type(f) is StopCommand for f in rig.tap.sent[n:])
    assert len(rig.tap.sent) > sent_before


def _rearm(rig: Rig) -> None:
    rig.loop.arm()
    rig.run(0.1)
    assert rig.loop.snapshot().state is SafetyState.ARMED
    rig.loop.request(0.3, 0.0)
    rig.run(0.5)


def test_flags_stop_the_console_after_100000_frames_and_need_a_new_arming() -> None:
    rig = Rig()
    rig.armed_at(0.3, settle_s=1.0)
    first = len(rig.tap.sent)
    rig.loop.run_cycles(FRAMES)                     # not traced: 100,000 snapshots are not needed
    assert len(rig.tap.sent) - first == FRAMES
    assert rig.loop.snapshot().state is SafetyState.ARMED and rig.sim.plant.wheel_radps[0] > 0.0

    rig.sim.set_fault(True)
    _stopped_at_once(rig, StopCause.FAULT, first)
    rig.sim.set_fault(False)
    rig.run(0.1)
    _rearm(rig)

    rig.loop.run_cycles(FRAMES // 2)                 # the other half of the old test's window
    rig.tap.tx_cut = True                            # the robot hears nothing: its watchdog trips
    rig.run_until(SafetyState.STOPPED, limit_s=2.0)
    assert rig.sim.flags & Flags.WATCHDOG and rig.loop.snapshot().cause is StopCause.WATCHDOG
    rig.tap.tx_cut = False
    _stopped_at_once(rig, StopCause.WATCHDOG, first)
    _rearm(rig)

    rig.loop.run_cycles(FRAMES // 3)
    rig.sim.set_estop(True)
    _stopped_at_once(rig, StopCause.ESTOP, first)
    rig.loop.arm()
    rig.run(0.1)
    assert rig.loop.snapshot().state is SafetyState.STOPPED        # no arming while the circuit is open
    assert rig.loop.snapshot().events[-1].text == "arming refused: the robot reports ESTOP"
    rig.sim.set_estop(False)
    rig.run(0.1)
    _rearm(rig)
    assert any(type(f) is WheelCommand and f.left > 0.0 for f in rig.tap.sent[-20:])
