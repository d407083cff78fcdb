"""The control loop in a child process (console/loop_process.py) on the simulated robot, on the wall clock.

Short runs with generous waits (a loaded 2-core host spawns an interpreter in seconds, not milliseconds); nothing here
asserts how fast anything happens: timing is in tests/benchmarks/bench_loop_process.py. Faults are made where they
happen: the pipe is shut down under the proxy (as when the parent dies), the child is signalled from outside.
"""

from __future__ import annotations

import json
import math
import os
import signal
import socket
import time
from collections.abc import Callable
from pathlib import Path

import pytest

from console.core.safety import SafetyState, StopCause
from console.errors import InputError, LinkOpenError, OutputError
from console.loop_process import ENDED, LoopProcess, LoopProcessEnded
from console.profile import load_profile
from console.record import read_csv, sidecar_path
from console.transport import open_url
from shaping.shaper import StopKind

WREN = Path(__file__).resolve().parents[2] / "profiles" / "wren.toml"
WAIT_S = 30.0


def _wait(condition: Callable[[], bool], timeout_s: float = WAIT_S) -> bool:
    deadline = time.monotonic() + timeout_s
    while time.monotonic() < deadline:
        if condition():
            return True
        time.sleep(0.01)
    return condition()


@pytest.fixture
def profile():
    return load_profile(WREN)


def _armed(proxy: LoopProcess) -> None:
    """Start, wait for the simulated robot's telemetry, arm."""
    proxy.start()
    assert _wait(lambda: proxy.snapshot().link.telemetry_received > 0)
    proxy.arm()
    assert _wait(lambda: proxy.snapshot().state is SafetyState.ARMED)


def _cruise(proxy: LoopProcess, v_mps: float) -> None:
    proxy.request(v_mps, 0.0)
    assert _wait(lambda: proxy.snapshot().shaped.v_mps == v_mps and proxy.snapshot().shaped.settled)


def test_requests_move_the_simulated_robot_and_stop_works(profile) -> None:
    limits = profile.limits
    proxy = LoopProcess(profile)
    try:
        _armed(proxy)
        assert proxy.scheduling != "not started"
        target = 0.5
        proxy.request(target, 0.0)
        seen = []
        assert _wait(lambda: seen.append(proxy.snapshot()) or seen[-1].shaped.v_mps == target)
        speeds = [s.shaped.v_mps for s in seen]
        # Common practice (jerk-limited velocity ramps): from rest to a higher target the speed never falls and never
        # passes the target, and the acceleration stays within the profile's bound.
        assert all(b >= a for a, b in zip(speeds, speeds[1:]))
        assert max(speeds) == target
        assert max(s.shaped.a_mps2 for s in seen) <= limits.accel_mps2 + 1e-9
        # The simulated wheels follow: body speed from the measured wheel rates (v = r (wl + wr) / 2, from memory).
        r = profile.geometry.wheel_radius_m

        def measured_v() -> float:
            s = proxy.snapshot()
            return r * (s.left_meas_radps + s.right_meas_radps) / 2.0 if s.left_meas_radps is not None else math.nan

        assert _wait(lambda: abs(measured_v() - target) < 0.1 * target)
        proxy.stop(StopKind.CONTROLLED)
        assert _wait(lambda: proxy.snapshot().state is SafetyState.STOPPED)
        end = proxy.snapshot()
        assert end.cause is StopCause.OPERATOR and end.shaped.v_mps == 0.0
        assert any(e.text == "armed" for e in end.events)
    finally:
        proxy.close()
    assert proxy.exitcode == 0 and proxy.failure is None


def test_close_brings_the_robot_to_rest_and_completes_the_recording(profile, tmp_path) -> None:
    record = tmp_path / "session.csv"
    proxy = LoopProcess(profile, record_path=record)
    _armed(proxy)
    _cruise(proxy, 0.4)
    proxy.close()                       # no stop() first: close does the controlled stop itself
    assert proxy.exitcode == 0 and proxy.sidecar_path == sidecar_path(record)
    rows = read_csv(record)
    meta = json.loads(sidecar_path(record).read_text())
    assert meta["rows_written"] == len(rows["t_s"]) and meta["dropped_rows"] == 0
    assert meta["loop"]["cycles"] == len(rows["t_s"]) == proxy.stats().cycles
    assert rows["state"][-1] == "stopped" and rows["v_mps"][-1] == 0.0
    assert "x_m" in rows                # pose columns on the simulated robot
    assert proxy.snapshot().cause is StopCause.PROGRAM_END


def _cut_pipe(proxy: LoopProcess) -> None:
    """Shut the socket under the proxy's connection down both ways: the child reads end-of-file, as if the parent had
    died (a plain close() would not wake the reader thread blocked on the same descriptor)."""
    cut = socket.fromfd(proxy._conn.fileno(), socket.AF_UNIX, socket.SOCK_STREAM)   # a duplicate of the descriptor
    cut.shutdown(socket.SHUT_RDWR)
    cut.close()


def _mean_stop_decel(record: Path) -> float:
    """Average deceleration over the recording's stopping rows: speed lost / time taken."""
    rows = read_csv(record)
    stopping = [i for i, state in enumerate(rows["state"]) if state == "stopping"]
    first, last = stopping[0], stopping[-1] + 1
    return (rows["v_mps"][first - 1] - rows["v_mps"][last]) / (rows["t_s"][last] - rows["t_s"][first - 1])


def test_a_broken_pipe_makes_the_child_stop_the_robot_and_exit(profile, tmp_path) -> None:
    record = tmp_path / "cut.csv"
    proxy = LoopProcess(profile, record_path=record)
    try:
        _armed(proxy)
        _cruise(proxy, 0.8)
        _cut_pipe(proxy)
        assert _wait(lambda: proxy.exitcode is not None)
        assert proxy.exitcode == 0
        assert _wait(lambda: proxy.snapshot().state is SafetyState.STOPPED)
        assert isinstance(proxy.failure, LoopProcessEnded)
        assert any(e.text.startswith(ENDED) for e in proxy.snapshot().events)
        proxy.request(0.3, 0.0)         # the child is gone: calls are dropped, never raised at the UI
    finally:
        proxy.close()
    assert sidecar_path(record).exists()                 # the child closed the recording on its way out
    rows = read_csv(record)
    assert rows["state"][-1] == "stopped" and rows["v_mps"][-1] == 0.0
    # A fast stop, not a controlled one: a ramp bounded by decel_mps2 cannot lose speed faster than that on average
    # (common practice), so an average above it shows the stop_decel_mps2 limits were used.
    assert _mean_stop_decel(record) > profile.limits.decel_mps2


@pytest.mark.parametrize("signum", [signal.SIGTERM, signal.SIGHUP, signal.SIGKILL], ids=["terminate", "hangup", "kill"])
def test_a_dead_child_shows_as_stopped_without_a_hang(profile, tmp_path, signum) -> None:
    record = tmp_path / "killed.csv"
    proxy = LoopProcess(profile, record_path=record)
    try:
        _armed(proxy)
        _cruise(proxy, 0.3)
        os.kill(proxy.pid, signum)
        assert _wait(lambda: any(e.text.startswith(ENDED) for e in proxy.snapshot().events))
        snap = proxy.snapshot()
        assert snap.state is SafetyState.STOPPED and snap.cause is StopCause.LOOP_FAILURE
        assert isinstance(proxy.failure, LoopProcessEnded)
        proxy.stop(StopKind.FAST)       # dropped, not raised
        proxy.ui_alive()
    finally:
        proxy.close()
    if signum != signal.SIGKILL:        # terminate, hangup: the child still stopped the robot and closed the recording
        assert proxy.exitcode == 0 and sidecar_path(record).exists()
        assert read_csv(record)["state"][-1] == "stopped"
    else:                               # killed outright: what was flushed is still a readable recording
        assert proxy.exitcode == -signal.SIGKILL and not sidecar_path(record).exists()
        assert len(read_csv(record)["t_s"]) > 0


def _refused_url() -> tuple[str, socket.socket]:
    """A TCP port on 127.0.0.1 that is bound but not listening: a connection to it is refused."""
    holder = socket.socket(socket.AF_INET, socket.SOCK_STREAM)
    holder.bind(("127.0.0.1", 0))
    return f"socket://127.0.0.1:{holder.getsockname()[1]}", holder


def _with_url(profile, url: str):
    import dataclasses

    return dataclasses.replace(profile, link=dataclasses.replace(profile.link, url=url))


def test_start_up_errors_come_back_as_the_same_one_line_errors(profile, tmp_path) -> None:
    url, holder = _refused_url()
    try:
        cases = [("nonsense://robot", InputError), (url, LinkOpenError)]
        for bad_url, error_type in cases:
            with pytest.raises(error_type) as in_process:
                open_url(bad_url, profile.link.baud)
            with pytest.raises(error_type) as via_child:
                LoopProcess(_with_url(profile, bad_url))
            assert type(via_child.value) is error_type
            assert str(via_child.value) == str(in_process.value) and "\n" not in str(via_child.value)
    finally:
        holder.close()
    blocker = tmp_path / "a-file"
    blocker.write_text("")
    with pytest.raises(OutputError) as unwritable:      # cannot write the output: exit 6
        LoopProcess(profile, record_path=blocker / "session.csv")
    assert str(blocker / "session.csv") in str(unwritable.value) and "\n" not in str(unwritable.value)
