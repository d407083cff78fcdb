"""What every verb that moves a robot shares about a running loop: the `LoopHandle` caller surface, the
`RequestSource` that feeds a loop from inside its cycle, and one way to bring the robot to rest.

A handle is the loop on a thread of this process (`console.loop.ControlLoop`) or in a child process
(`console.loop_process.LoopProcess`); `drive`, `play`, `bench` (with and without its screen) and `calibrate` only use
this surface, so none of them knows which one it holds.
"""

from __future__ import annotations

import time
from collections.abc import Callable
from dataclasses import dataclass
from typing import TYPE_CHECKING, Protocol

from console.core.safety import SafetyState, StopCause
from shaping.ramp import plan_ramp
from shaping.shaper import StopKind, speed_limits, turn_limits

if TYPE_CHECKING:
    from console.core.link import LinkStats
    from console.core.step import LoopStats, Snapshot, SourceStatus
    from console.profile import Profile

STOP_MARGIN_S = 1.0
"""Added to the time a stop should take (its ramps from the current state) before it is escalated."""
REST_POLL_S = 0.01
ESCALATION = (StopKind.CONTROLLED, StopKind.FAST, StopKind.IMMEDIATE)


WIRE_KEPT = 512
"""Link reads and writes the runner keeps for the frame monitor (about 2.5 s at 100 Hz both ways)."""


@dataclass(frozen=True, slots=True)
class WireChunk:
    """One transport read or write, as the bytes went (the frame monitor splits and decodes them)."""

    n: int              # running number from 1 (a Python int: it never wraps)
    t_s: float          # loop time
    sent: bool          # True: console -> robot
    data: bytes


class LoopHandle(Protocol):
    """The caller side of a running control loop; every call returns at once (values are taken next cycle)."""

    profile: Profile

    @property
    def failure(self) -> BaseException | None: ...

    def request(self, v_mps: float, omega_radps: float) -> None: ...

    def request_wheels(self, left_radps: float, right_radps: float) -> None: ...

    def arm(self) -> None: ...

    def stop(self, kind: StopKind, cause: StopCause = StopCause.OPERATOR) -> None: ...

    def operator_alive(self) -> None: ...

    def reconnect(self) -> None: ...

    def ui_alive(self) -> None: ...

    def snapshot(self) -> Snapshot: ...

    def stats(self) -> LoopStats: ...

    def link_stats(self) -> LinkStats: ...

    def wire_since(self, n: int) -> tuple[WireChunk, ...]: ...   # the kept chunks numbered above n, oldest first

    def start(self, realtime: bool = True) -> None: ...

    def close(self) -> None: ...


class RequestSource(Protocol):
    """Where a running loop's requests come from besides its caller: a request trace (`play`), a bench program
    (`bench`, `calibrate`), an input device (`drive --input`).

    The runner calls `poll` once per cycle, in the loop's own thread and process, before the core step: a trace row
    or a program sample is in force from the very cycle it is due, and a device read there never waits behind the
    screen's pipe. The source acts through the caller surface it is given (`request`, `request_wheels`, `arm`,
    `stop`) and returns what the screens show (kept in every snapshot as `Snapshot.source`). For `LoopProcess` the
    source is pickled into the child: open devices in the first `poll`, not in `__init__`. The terminal keyboard is
    no source: the screen calls the handle directly.
    """

    def poll(self, t_s: float, loop: LoopHandle) -> SourceStatus | None: ...


def stop_allowance_s(loop: LoopHandle, kind: StopKind) -> float:
    """How long the stop should take from the current shaped state (both axes' ramps to zero), plus a margin."""
    shaped, limits = loop.snapshot().shaped, loop.profile.limits
    stop = kind if kind is StopKind.FAST else None
    speed = plan_ramp(shaped.v_mps, shaped.a_mps2, 0.0, speed_limits(limits, stop)).duration
    turn = plan_ramp(shaped.omega_radps, shaped.alpha_radps2, 0.0, turn_limits(limits, stop)).duration
    return max(speed, turn) + STOP_MARGIN_S


def at_rest(loop: LoopHandle) -> bool:
    """No motion frames go out any more (disarmed or stopped), or the loop failed (it then sends only stops)."""
    return loop.failure is not None or loop.snapshot().state in (SafetyState.DISARMED, SafetyState.STOPPED)


def bring_to_rest(loop: LoopHandle, kind: StopKind, cause: StopCause, *,
                  escalations: Callable[[], int] = lambda: 0, wait: Callable[[float], None] = time.sleep,
                  clock: Callable[[], float] = time.monotonic,
                  announce: Callable[[StopKind], None] = lambda kind: None) -> None:
    """Stop with `kind`, then harsher kinds in turn (controlled -> fast -> immediate) whenever the robot is not at
    rest in the time the current stop should take, or when `escalations()` (a count: repeated Ctrl-C or signals)
    goes up. `wait` and `clock` are the wall clock's by default; a virtual-clock run passes its own, which advance
    the loop. `announce` hears of every escalation.

    The UI heartbeat is beaten meanwhile: whoever calls this is the only one left to do it, and a UI-stall stop must
    not interrupt the stop asked for here.
    """
    asked = escalations()
    for step in ESCALATION[ESCALATION.index(kind):]:
        if step is not kind:
            announce(step)
        loop.stop(step, cause)
        deadline = clock() + stop_allowance_s(loop, step)
        wait(2.0 / loop.profile.link.rate_hz)               # let the loop take the stop before judging the state
        while not at_rest(loop) and clock() < deadline:
            if escalations() > asked:
                asked = escalations()
                break
            loop.ui_alive()
            wait(REST_POLL_S)
        if at_rest(loop):
            return
