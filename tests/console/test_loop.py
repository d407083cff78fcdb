"""The control loop on a virtual clock against the in-process simulated robot: safety states and stop causes,
stop kinds, re-arming, the deadline scheduler, recording, dead reckoning.

Fault injection sits where a real fault would: `Tap` wraps the console's transport end and can cut the receive or
the send direction (a broken wire), the robot end can be closed (a pulled cable), the simulated firmware can report
a fault. Every frame the console writes is decoded by the protocol's own Decoder, so the tests read the wire.
"""

from __future__ import annotations

import dataclasses
import math
import time
from pathlib import Path

import numpy
import pytest

from console.core.safety import SafetyState, StopCause
from console.loop import CycleStats, DeadlineScheduler, ControlLoop, VirtualClock, WallClock
from console.profile import load_profile
from console.protocol import Decoder, Flags, Heartbeat, StopCommand, WheelCommand
from console.record import Recorder, read_csv
from console.sim.firmware import SimRobot
from console.transport import memory_pair
from shaping.shaper import StopKind

ROOT = Path(__file__).resolve().parents[2]
WREN = ROOT / "profiles" / "wren.toml"
# Stop categories of the machinery-safety standard for electrical equipment (IEC 60204-1, clause 9.2.2):
# 0 = removal of power at once, 1 = controlled stop then removal of power, 2 = controlled stop, power kept.
CATEGORY = {StopKind.IMMEDIATE: 0, StopKind.FAST: 1, StopKind.CONTROLLED: 2}


class Tap:
    """The console's transport end, with the wire decoded and either direction cuttable."""

    def __init__(self, inner, clock: VirtualClock) -> None:
        self.inner, self.clock, self.url = inner, clock, inner.url
        self.decoder = Decoder()
        self.sent: list = []
        self.rx_cut = self.tx_cut = False
        self.stall_on_write: dict[int, float] = {}   # write number -> virtual seconds the write takes

    def write(self, data: bytes) -> None:
        stall = self.stall_on_write.get(len(self.sent))
        if stall:
            self.clock.sleep_until(self.clock.now() + stall)
        self.sent.extend(self.decoder.feed(data))
        if not self.tx_cut:
            self.inner.write(data)

    def read(self) -> bytes:
        data = self.inner.read()
        return b"" if self.rx_cut else data

    def close(self) -> None:
        self.inner.close()


class Rig:
    def __init__(self, profile=None, *, recorder_path: Path | None = None, **loop_options) -> None:
        self.profile = profile or load_profile(WREN)
        self.clock = VirtualClock()
        console_end, self.robot_end = memory_pair()
        self.sim = SimRobot(self.profile, self.robot_end)
        self.tap = Tap(console_end, self.clock)
        self.recorder = Recorder(recorder_path, self.profile, "sim") if recorder_path else None
        self.loop = ControlLoop(self.profile, self.tap, self.clock, sim=self.sim, recorder=self.recorder,
                                **loop_options)
        self.rate = self.profile.link.rate_hz
        self.trace: list = []   # one snapshot per cycle

    def run(self, seconds: float, each=None) -> None:
        for _ in range(round(seconds * self.rate)):
            if each is not None:
                each()
            self.loop.run_cycles(1)
            self.trace.append(self.loop.snapshot())

    def run_until(self, state: SafetyState, limit_s: float = 10.0) -> None:
        for _ in range(round(limit_s * self.rate)):
            self.loop.run_cycles(1)
            self.trace.append(self.loop.snapshot())
            if self.loop.snapshot().state is state:
                return
        raise AssertionError(f"not {state} after {limit_s} s: {self.loop.snapshot().state}")

    def armed_at(self, v: float, omega: float = 0.0, settle_s: float = 3.0) -> None:
        self.run(0.3)                      # telemetry first: arming needs a live link
        self.loop.arm()
        self.run(0.02)
        assert self.loop.snapshot().state is SafetyState.ARMED
        self.loop.request(v, omega)
        self.run(settle_s)
        assert self.loop.snapshot().shaped.v_mps == pytest.approx(v, abs=1e-9)

    def frames_since(self, n: int) -> list:
        return self.tap.sent[n:]


def test_no_motion_frame_before_arming_and_the_release_frame_first() -> None:
    rig = Rig()
    rig.loop.request(0.5, 0.5)             # asked for motion, never armed
    rig.run(2.0)
    assert rig.tap.sent and all(type(f) is Heartbeat for f in rig.tap.sent)
    assert rig.sim.plant.wheel_radps == (0.0, 0.0) and rig.sim.pose == (0.0, 0.0, 0.0)
    assert rig.loop.snapshot().state is SafetyState.DISARMED
    n = len(rig.tap.sent)
    rig.loop.arm()
    rig.run(1.0)
    first = rig.frames_since(n)[0]
    assert type(first) is WheelCommand and (first.left, first.right) == (0.0, 0.0)   # the robot's release frame
    assert rig.sim.plant.wheel_radps == (0.0, 0.0)    # the request made before arming was discarded
    assert not rig.sim.flags & Flags.STOPPED          # released


@pytest.mark.parametrize("kind", [StopKind.CONTROLLED, StopKind.FAST, StopKind.IMMEDIATE])
def test_each_stop_kind(kind: StopKind) -> None:
    rig = Rig()
    rig.armed_at(0.8)
    n, k = len(rig.tap.sent), len(rig.trace)
    rig.loop.stop(kind)
    rig.run_until(SafetyState.STOPPED)
    frames = rig.frames_since(n)
    stops = [f for f in frames if type(f) is StopCommand]
    assert stops and {f.category for f in stops} == {CATEGORY[kind]}
    first_stop = frames.index(stops[0])
    assert all(type(f) is WheelCommand for f in frames[:first_stop])      # the ramp down: motion frames
    rig.run(1.0)
    assert all(type(f) is StopCommand for f in rig.frames_since(n + first_stop))   # then only stop frames
    trace = rig.trace[k:]
    decel = max(-s.shaped.a_mps2 for s in trace)
    limits = rig.profile.limits
    if kind is StopKind.IMMEDIATE:
        assert first_stop == 0 and trace[0].shaped.v_mps == 0.0
        assert rig.sim.flags & Flags.POWER_OFF and rig.sim.plant.wheel_radps == (0.0, 0.0)
    else:
        a = limits.decel_mps2 if kind is StopKind.CONTROLLED else limits.stop_decel_mps2
        assert decel == pytest.approx(a, rel=1e-6)
        assert rig.sim.plant.wheel_radps == pytest.approx((0.0, 0.0), abs=1e-6)
    snapshot = rig.loop.snapshot()
    assert snapshot.state is SafetyState.STOPPED and snapshot.cause is StopCause.OPERATOR


def test_stopping_distance_is_v_squared_over_2a_on_a_recording(tmp_path: Path) -> None:
    """Fast stop from 1 m/s with a jerk limit so high that the deceleration is constant: the commanded stopping
    distance is v^2 / (2a) (common practice). The robot itself, whose motors follow as a first-order lag with time
    constant tau behind a dead time d, travels v * (tau + d) further: for a linear lag the area between its input and
    output is tau times the input's total change (from memory: the step response's integral error of a first-order
    system)."""
    wren = load_profile(WREN)
    profile = dataclasses.replace(wren, limits=dataclasses.replace(wren.limits, stop_jerk_mps3=5000.0),
                                  sim=dataclasses.replace(wren.sim, noise_radps=0.0))
    path = tmp_path / "stop.csv"
    rig = Rig(profile, recorder_path=path)
    rig.armed_at(1.0)
    rig.loop.stop(StopKind.FAST)
    rig.run_until(SafetyState.STOPPED)
    rig.run(1.5)                                   # let the motors come to rest
    rig.recorder.close(rig.loop.stats())
    rec = read_csv(path)
    armed = numpy.flatnonzero(rec["state"] == "armed")[-1]
    after = slice(armed, None)
    t, v = rec["t_s"][after], rec["v_mps"][after]
    a = profile.limits.stop_decel_mps2
    commanded = numpy.trapezoid(v, t)
    assert commanded == pytest.approx(1.0**2 / (2 * a), rel=0.005)
    x = rec["x_m"]
    travelled = x[-1] - x[armed]
    lag = profile.sim.motor_time_constant_s + profile.sim.motor_dead_time_s
    assert travelled == pytest.approx(1.0**2 / (2 * a) + 1.0 * lag, abs=0.01)


def test_link_loss_when_the_robot_end_closes() -> None:
    rig = Rig()
    rig.armed_at(0.6)
    rig.robot_end.close()                          # the cable is pulled
    n = len(rig.tap.sent)
    rig.run(0.05)
    snapshot = rig.loop.snapshot()
    assert snapshot.state is SafetyState.STOPPED and snapshot.cause is StopCause.LINK_LOST
    assert len(rig.tap.sent) == n                  # nothing more is written to a dead port
    assert any("closed by the robot end" in e.text for e in snapshot.events)
    rig.loop.arm()
    rig.run(0.05)
    assert rig.loop.snapshot().state is SafetyState.STOPPED
    assert "arming refused" in rig.loop.snapshot().events[-1].text


def test_link_loss_when_telemetry_stops() -> None:
    rig = Rig()
    rig.armed_at(0.6)
    cut = len(rig.trace)
    rig.tap.rx_cut = True                          # the receive wire breaks; commands still get through
    rig.run_until(SafetyState.STOPPED)
    snapshot = rig.loop.snapshot()
    assert snapshot.cause is StopCause.LINK_LOST
    timeout = rig.profile.link.telemetry_timeout_s
    waited = snapshot.t_s - rig.trace[cut - 1].t_s
    telemetry_period = 1.0 / rig.profile.sim.telemetry_rate_hz
    assert timeout - telemetry_period <= waited <= timeout + 2.0 / rig.rate
    assert type(rig.tap.sent[-1]) is StopCommand and rig.tap.sent[-1].category == 0


def test_watchdog_flag_in_telemetry_stops_the_console() -> None:
    rig = Rig()
    rig.armed_at(0.6)
    rig.tap.tx_cut = True                          # the send wire breaks: the robot's watchdog trips
    rig.run_until(SafetyState.STOPPED, limit_s=2.0)
    assert rig.sim.flags & Flags.WATCHDOG
    assert rig.loop.snapshot().cause is StopCause.WATCHDOG
    rig.tap.tx_cut = False
    rig.loop.request(0.6, 0.0)
    rig.run(0.5)
    assert rig.sim.flags & Flags.STOPPED           # nothing restarts the robot but a new arming
    rig.loop.arm()
    rig.run(0.1)
    assert rig.loop.snapshot().state is SafetyState.ARMED and not rig.sim.flags & Flags.WATCHDOG


def test_fault_flag_stops_and_blocks_arming_until_cleared() -> None:
    rig = Rig()
    rig.armed_at(0.6)
    rig.sim.set_fault(True)
    rig.run_until(SafetyState.STOPPED, limit_s=1.0)
    assert rig.loop.snapshot().cause is StopCause.FAULT
    rig.loop.arm()
    rig.run(0.1)
    assert rig.loop.snapshot().state is SafetyState.STOPPED
    assert "arming refused" in rig.loop.snapshot().events[-1].text
    rig.sim.set_fault(False)
    rig.run(0.1)
    rig.loop.arm()
    rig.run(0.1)
    assert rig.loop.snapshot().state is SafetyState.ARMED


def test_operator_silence_is_a_controlled_deadman_stop() -> None:
    rig = Rig(operator_timeout_s=0.3)
    rig.run(0.3)
    rig.loop.arm()
    rig.loop.request(0.5, 0.0)
    rig.run(1.0, each=rig.loop.operator_alive)
    assert rig.loop.snapshot().state is SafetyState.ARMED
    silent_from = rig.trace[-1].t_s
    n = len(rig.tap.sent)
    rig.run_until(SafetyState.STOPPED)
    stop_event = next(e for e in rig.loop.snapshot().events if "stop (deadman)" in e.text)
    assert 0.3 < stop_event.t_s - silent_from <= 0.3 + 2.0 / rig.rate
    assert rig.loop.snapshot().cause is StopCause.DEADMAN
    assert {f.category for f in rig.frames_since(n) if type(f) is StopCommand} == {CATEGORY[StopKind.CONTROLLED]}


def test_ui_silence_is_a_fast_stop() -> None:
    rig = Rig(ui_timeout_s=0.2)
    rig.run(0.3, each=rig.loop.ui_alive)
    rig.loop.arm()
    rig.loop.request(0.5, 0.0)
    rig.run(1.0, each=rig.loop.ui_alive)
    assert rig.loop.snapshot().state is SafetyState.ARMED
    n = len(rig.tap.sent)
    rig.run_until(SafetyState.STOPPED)
    assert rig.loop.snapshot().cause is StopCause.UI_STALL
    assert {f.category for f in rig.frames_since(n) if type(f) is StopCommand} == {CATEGORY[StopKind.FAST]}


def test_after_a_stop_motion_needs_a_new_arming_and_ramps_from_zero() -> None:
    rig = Rig()
    rig.armed_at(0.8)
    rig.loop.stop(StopKind.CONTROLLED)
    rig.run(0.1)
    rig.loop.arm()                                  # still stopping: refused
    rig.run(0.01)
    assert "arming refused: still stopping" in rig.loop.snapshot().events[-1].text
    rig.run_until(SafetyState.STOPPED)
    rig.loop.request(0.8, 0.0)
    n = len(rig.tap.sent)
    rig.run(0.5)
    assert all(type(f) is StopCommand for f in rig.frames_since(n))
    rig.loop.arm()
    rig.run(0.01)
    rig.loop.request(0.8, 0.0)
    k = len(rig.trace)
    rig.run(0.05)
    # From rest, a jerk-limited ramp starts as a = j t, v = j t^2 / 2 (from memory: integrate a constant jerk).
    jerk = rig.profile.limits.jerk_mps3
    for s in rig.trace[k:]:
        t = s.t_s - rig.trace[k - 1].t_s
        assert s.shaped.v_mps == pytest.approx(jerk * t**2 / 2.0, rel=1e-6)


def test_scheduler_has_no_drift_whatever_the_wake_up_latency() -> None:
    class LateClock:
        """Wakes up late by a random share of a period, as an OS sleep does."""

        def __init__(self) -> None:
            self.t = 100.0
            self.rng = numpy.random.default_rng(11)
            self.late: list[float] = []

        def now(self) -> float:
            return self.t

        def sleep_until(self, t: float) -> None:
            self.late.append(float(self.rng.uniform(0.0, 0.004)))
            self.t = max(self.t, t) + self.late[-1]

    clock, period = LateClock(), 0.005
    scheduler = DeadlineScheduler(clock, period)
    ticks = [scheduler.wait() for _ in range(100_000)]
    assert [tick.index for tick in ticks] == list(range(1, 100_001))
    assert scheduler.missed_total == 0
    assert ticks[-1].scheduled_s == pytest.approx(100.0 + 100_000 * period, abs=1e-9)   # no accumulated error
    numpy.testing.assert_allclose([tick.error_s for tick in ticks], clock.late, atol=1e-9)


def test_scheduler_skips_missed_deadlines_and_never_bunches() -> None:
    clock, period = VirtualClock(), 0.01
    scheduler = DeadlineScheduler(clock, period)
    work = {10: 2.5 * period, 20: 1.0 * period + 1e-6, 30: 7.2 * period}     # cycle index -> work time
    ticks = []
    for _ in range(50):
        tick = scheduler.wait()
        ticks.append(tick)
        clock.sleep_until(clock.now() + work.get(tick.index, 0.1 * period))
    starts = numpy.array([tick.started_s for tick in ticks])
    assert (numpy.diff(starts) >= period - 1e-12).all()                 # never two cycles closer than a period
    assert all(tick.started_s >= tick.scheduled_s for tick in ticks)
    missed = {ticks[i - 1].index: tick.missed for i, tick in enumerate(ticks) if tick.missed}
    # a cycle that works w periods from its deadline overruns floor(w) later deadlines
    assert missed == {10: 2, 20: 1, 30: 7}
    assert scheduler.missed_total == 10
    assert all(tick.dt_s == pytest.approx((tick.missed + 1) * period) for tick in ticks[1:])


def test_overruns_in_the_loop_are_counted_and_the_wire_stays_spaced(tmp_path: Path) -> None:
    rig = Rig(recorder_path=tmp_path / "overrun.csv")
    rig.tap.stall_on_write = {40: 3.5 / rig.rate}                        # one write blocks for 3.5 periods
    rig.run(1.0)
    rig.recorder.close(rig.loop.stats())
    assert rig.loop.stats().overruns == 3
    t = read_csv(tmp_path / "overrun.csv")["t_s"]
    gaps = numpy.diff(t) * rig.rate
    assert numpy.count_nonzero(numpy.abs(gaps - 1.0) > 1e-6) == 1 and gaps.max() == pytest.approx(4.0)


def test_recording_from_the_loop(tmp_path: Path) -> None:
    path = tmp_path / "session.csv"
    rig = Rig(recorder_path=path)
    rig.armed_at(0.5, 0.4)
    rig.loop.stop(StopKind.CONTROLLED)
    rig.run_until(SafetyState.STOPPED)
    rig.recorder.close(rig.loop.stats())
    rec = read_csv(path)
    assert len(rec["t_s"]) == len(rig.trace) == rig.loop.stats().cycles
    states = [s for i, s in enumerate(rec["state"]) if i == 0 or s != rec["state"][i - 1]]
    assert states == ["disarmed", "armed", "stopping", "stopped"]
    assert (rec["x_m"][-1], rec["y_m"][-1], rec["heading_rad"][-1]) == rig.sim.pose
    geometry = rig.profile.geometry
    left, right = geometry.to_wheels(0.5, 0.4)
    steady = (rec["state"] == "armed") & (numpy.abs(rec["v_mps"] - 0.5) < 1e-12)
    assert rec["left_cmd_radps"][steady] == pytest.approx(left) and rec["right_cmd_radps"][steady] == pytest.approx(right)
    # measured follows commanded once the motor lag has passed (noise 0.05 rad/s in this profile)
    late = steady & (rec["t_s"] > rec["t_s"][steady][0] + 0.5)
    assert numpy.abs(rec["left_meas_radps"][late] - left).max() < 0.3


def test_dead_reckoning_follows_the_true_pose_without_the_sim_in_the_loop() -> None:
    profile = load_profile(WREN)
    clock = VirtualClock()
    console_end, robot_end = memory_pair()
    sim = SimRobot(profile, robot_end)
    loop = ControlLoop(profile, console_end, clock)   # hardware-like: the loop knows nothing of the sim
    period = 1.0 / profile.link.rate_hz

    def run(seconds: float) -> None:
        for _ in range(round(seconds / period)):
            loop.run_cycles(1)
            sim.advance(period)

    run(0.3)
    loop.arm()
    run(0.01)
    loop.request(0.6, 0.5)
    run(6.0)
    loop.stop(StopKind.CONTROLLED)
    run(2.0)
    x, y, heading = loop.snapshot().pose
    true_x, true_y, true_heading = sim.pose
    assert math.hypot(true_x, true_y) > 1.5
    assert math.hypot(x - true_x, y - true_y) < 0.05 and abs(heading - true_heading) < 0.05


def test_wall_clock_never_returns_before_the_deadline() -> None:
    clock = WallClock()
    for delay in (0.0, 0.0001, 0.0007, 0.003):
        deadline = clock.now() + delay
        clock.sleep_until(deadline)
        assert clock.now() >= deadline


def test_cycle_stats_percentiles_over_the_window_and_exact_max() -> None:
    stats = CycleStats(capacity=1000)
    rng = numpy.random.default_rng(5)
    errors = rng.exponential(1e-4, size=5000)
    errors[10] = 0.5                                  # an early outlier leaves the window but stays the maximum
    for e in errors:
        stats.add(float(e), float(e) / 2)
    p50, p99, work = stats.percentiles()
    window = errors[-1000:]
    assert (p50, p99) == (numpy.percentile(window, 50), numpy.percentile(window, 99))
    assert work == pytest.approx(numpy.percentile(window / 2, 99))
    assert stats.error_max_s == 0.5 and stats.count == 5000


def test_template_firmware_drives_end_to_end() -> None:
    """wren-template.toml: duty-fraction commands in the firmware's own line format, telemetry read by its regex."""
    rig = Rig(load_profile(ROOT / "profiles" / "wren-template.toml"))
    rig.armed_at(0.5, 0.5)
    left, right = rig.profile.geometry.to_wheels(0.5, 0.5)
    rig.run(1.0)
    snapshot = rig.loop.snapshot()
    assert snapshot.left_meas_radps == pytest.approx(left, abs=0.3)
    assert snapshot.right_meas_radps == pytest.approx(right, abs=0.3)
    assert snapshot.left_cmd == pytest.approx(left / rig.profile.units.full_duty_radps)   # duty fraction on the wire
    rig.loop.stop(StopKind.CONTROLLED)
    rig.run_until(SafetyState.STOPPED)
    rig.run(1.0)
    assert rig.sim.plant.wheel_radps == pytest.approx((0.0, 0.0), abs=0.05)


def test_wheel_rates_around_the_shaper_then_hand_back_and_stops_ramp_down() -> None:
    rig = Rig()
    rig.run(0.3)
    rig.loop.arm()
    rig.run(0.02)
    n = len(rig.tap.sent)
    rig.loop.request_wheels(8.0, -3.0)                   # a step, as a bench program asks for
    rig.run(0.01)
    step = rig.frames_since(n)[0]
    units = rig.profile.units
    assert (step.left, step.right) == pytest.approx(units.to_motor(8.0, -3.0))   # at once: no ramp
    rig.loop.request_wheels(99.0, 0.0)
    rig.run(1.0)
    assert rig.loop.snapshot().shaped.left_radps == rig.profile.limits.wheel_rate_radps   # clamped
    assert rig.sim.plant.wheel_radps[0] == pytest.approx(rig.profile.limits.wheel_rate_radps, rel=0.02)
    rig.loop.request(0.0, 0.0)                            # hand back: ramp to zero first, then the shaper
    k = len(rig.trace)
    rig.run(2.0)
    lefts = numpy.array([s.shaped.left_radps for s in rig.trace[k - 1:]])
    limits, geometry = rig.profile.limits, rig.profile.geometry
    ramp = min(limits.decel_mps2 / geometry.wheel_radius_m, limits.wheel_accel_radps2)
    assert -numpy.diff(lefts).min() >= -1e-12 and numpy.diff(lefts).min() == pytest.approx(-ramp / rig.rate)
    assert lefts[-1] == 0.0 and "back through the shaper" in [e.text for e in rig.loop.snapshot().events]
    rig.loop.request(0.5, 0.0)                            # the shaper starts from rest
    rig.run(0.02)
    assert 0.0 < rig.loop.snapshot().shaped.v_mps < 0.01
    rig.loop.request_wheels(10.0, 10.0)
    rig.run(0.5)
    rig.loop.stop(StopKind.FAST)
    rig.run_until(SafetyState.STOPPED)
    stops = [f.category for f in rig.tap.sent if type(f) is StopCommand]
    assert stops and set(stops) == {CATEGORY[StopKind.FAST]}
    assert rig.loop.snapshot().shaped.v_mps == 0.0


def test_a_failing_cycle_on_the_thread_sends_a_stop_frame_and_reports_the_failure() -> None:
    """A bug inside a cycle must not leave the robot on its last command: the thread sends a stop frame and keeps the
    exception for the caller."""

    class Broken(Tap):
        def read(self) -> bytes:
            if len(self.sent) >= 30:
                raise RuntimeError("a bug in the codec")
            return super().read()

    profile = load_profile(WREN)
    clock = WallClock()
    console_end, robot_end = memory_pair()
    tap = Broken(console_end, clock)
    loop = ControlLoop(profile, tap, clock, sim=SimRobot(profile, robot_end))
    loop.start(realtime=False)
    loop.arm()
    loop.request(0.5, 0.0)
    deadline = time.monotonic() + 30.0
    while loop.failure is None and time.monotonic() < deadline:
        time.sleep(0.01)
    loop.close()
    assert isinstance(loop.failure, RuntimeError)
    assert type(tap.sent[-1]) is StopCommand
    assert "control loop failed" in loop.snapshot().events[-1].text
    assert loop.snapshot().state is SafetyState.STOPPED
