"""One bench run: a program streamed through the control loop to the robot, recorded with its segment times.

`BenchRun` is what the `bench` verb, `calibrate` and a bench screen share: it builds transport, clock, recorder and
loop, waits for telemetry, arms, feeds the precomputed requests from the loop's per-cycle hook (so they are
sample-exact on the wall clock too), ends with a controlled stop, and writes `<csv>.bench.json` next to the
recording (program, segments in recording time, geometry) for `report`.
"""

from __future__ import annotations

import enum
import json
import time
from dataclasses import dataclass
from datetime import UTC, datetime
from pathlib import Path
from typing import Any

from console.bench.program import BoundProgram, Program
from console.core.safety import SafetyState, StopCause
from console.core.step import Snapshot, SourceStatus
from console.errors import InputError, LinkLost, OutputError
from console.files import reason, write_atomic
from console.links import is_simulated, open_link
from console.loop import ControlLoop, VirtualClock, WallClock
from console.profile import Profile
from console.record import Recorder, sidecar_path
from console.session import LoopHandle
from shaping.shaper import StopKind

FORMAT = "diffdeck bench 1"
STOP_WAIT_S = 30.0
"""Longest a run closed early waits for its controlled stop to finish."""
TELEMETRY_WAIT_S = 2.0
"""How long a run waits for the first telemetry before giving up (the robot is not answering)."""


class Phase(enum.Enum):
    WAITING = "waiting for telemetry"
    ARMING = "arming"
    RUNNING = "running"
    ENDING = "stopping"
    DONE = "done"


@dataclass(frozen=True, slots=True)
class BenchProgress:
    t_s: float                   # program time (0 at the first armed cycle)
    duration_s: float
    fraction: float              # 0..1
    segment_index: int
    segment_count: int
    segment_name: str
    phase: Phase
    cause: StopCause | None      # why the robot stopped (PROGRAM_END when the program ran to its end)

    @property
    def done(self) -> bool:
        return self.phase is Phase.DONE


@dataclass(frozen=True, slots=True)
class BenchResult:
    recording: Path
    bench_sidecar: Path
    completed: bool
    cause: StopCause | None
    failure: str | None          # a run that could not start (no telemetry, arming refused)


def bench_sidecar_path(csv_path: str | Path) -> Path:
    csv_path = Path(csv_path)
    return csv_path.with_name(csv_path.name + ".bench.json")


def _recording_path(out_dir: Path, profile: Profile, program: Program) -> Path:
    stamp = datetime.now(UTC).strftime("%Y%m%dT%H%M%SZ")
    base = f"bench-{profile.path.stem}-{program.name}-{stamp}"
    path, n = out_dir / f"{base}.csv", 1
    while path.exists():
        n += 1
        path = out_dir / f"{base}-{n}.csv"
    return path


class BenchRun:
    """A program on one robot. Fast (virtual clock, `step`) on the simulated robot; real time (`start`) otherwise."""

    def __init__(self, profile: Profile, program: Program, *, out_dir: Path = Path("recordings"),
                 link_url: str | None = None, fast: bool | None = None, recording: Path | None = None,
                 ui_timeout_s: float | None = None) -> None:
        url = link_url or profile.link.url
        on_sim = is_simulated(url)
        self.fast = on_sim if fast is None else fast
        if self.fast and not on_sim:
            raise InputError("bench", "--link", url, "the virtual clock (fast) only on the simulated robot (sim)")
        self.profile, self.program, self.url = profile, program, url
        self.bound = BoundProgram(program, profile.envelope)       # raises ProgramError before anything opens
        self.period_s = 1.0 / profile.link.rate_hz
        self.samples = self.bound.sample(self.period_s)
        link = open_link(url, profile)
        self.sim: Any = link.sim
        transport = link.transport
        self.path = recording or _recording_path(out_dir, profile, program)
        try:
            self.recorder = Recorder(self.path, profile, url)
        except (OSError, OutputError) as error:
            transport.close()
            if isinstance(error, OutputError):
                raise
            raise OutputError(str(self.path), f"cannot be written ({reason(error)})") from None
        clock = VirtualClock() if self.fast else WallClock()
        self.loop = ControlLoop(profile, transport, clock, sim=self.sim, recorder=self.recorder, url=url,
                                source=self, ui_timeout_s=ui_timeout_s)
        self._phase = Phase.WAITING
        self._t = 0.0
        self._t0: float | None = None      # recording time of program sample 0
        self._k = 0
        self._cause: StopCause | None = None
        self._failure: str | None = None
        self._result: BenchResult | None = None
        self._started = False

    # -- the loop thread's hook -------------------------------------------------------------------------------

    def poll(self, t: float, loop: LoopHandle) -> SourceStatus | None:
        """The run as the loop's request source (console.session.RequestSource)."""
        self._on_cycle(t)
        return None

    def _on_cycle(self, t: float) -> None:
        self._t = t
        snap = self.loop.snapshot()
        if self._phase is Phase.WAITING:
            if snap.link.telemetry_received > 0:
                self.loop.arm()
                self._phase = Phase.ARMING
            elif t > TELEMETRY_WAIT_S or snap.state is SafetyState.STOPPED:
                self._fail(f"no telemetry from the robot within {TELEMETRY_WAIT_S:g} s")
            return
        if self._phase is Phase.ARMING:
            if snap.state is SafetyState.ARMED:
                self._t0, self._phase = t, Phase.RUNNING
            elif snap.state is not SafetyState.DISARMED or t > 2 * TELEMETRY_WAIT_S:
                refusal = [e.text for e in snap.events if "arming refused" in e.text]
                self._fail(refusal[-1] if refusal else "the robot could not be armed")
                return
            else:
                return
        if self._phase is Phase.RUNNING:
            if snap.state is not SafetyState.ARMED:          # a stop from elsewhere (link, watchdog, operator)
                self._cause, self._phase = snap.cause, Phase.ENDING
                return
            k = int(round((t - (self._t0 or 0.0)) / self.period_s))
            samples = self.samples
            if k >= samples.t_s.size:
                self.loop.stop(StopKind.CONTROLLED, StopCause.PROGRAM_END)
                self._phase = Phase.ENDING
                return
            self._k = k
            first, second = float(samples.first[k]), float(samples.second[k])
            if samples.wheels[k]:
                self.loop.request_wheels(first, second)      # around the shaper (the program said so)
            else:
                self.loop.request(first, second)
            return
        if self._phase is Phase.ENDING and snap.state in (SafetyState.STOPPED, SafetyState.DISARMED):
            self._cause = self._cause or snap.cause
            self._phase = Phase.DONE

    def _fail(self, why: str) -> None:
        self._failure, self._phase = why, Phase.DONE

    # -- caller side ------------------------------------------------------------------------------------------

    @property
    def progress(self) -> BenchProgress:
        t = 0.0 if self._t0 is None else max(0.0, self._t - self._t0)
        duration = self.bound.duration_s
        index = int(self.samples.segment[min(self._k, self.samples.segment.size - 1)])
        return BenchProgress(min(t, duration), duration, min(1.0, t / duration), index, len(self.bound.segments),
                             self.bound.segments[index].segment.name, self._phase, self._cause)

    def snapshot(self) -> Snapshot:
        return self.loop.snapshot()

    def step(self, cycles: int = 1) -> bool:
        """Virtual clock: run up to `cycles` loop cycles; False once the run is over."""
        for _ in range(cycles):
            if self._phase is Phase.DONE:
                return False
            self.loop.run_cycles(1)
        return self._phase is not Phase.DONE

    def run_to_end(self) -> BenchResult:
        """Virtual clock: the whole program at CPU speed, then close."""
        while self.step(1000):
            pass
        return self.close()

    def start(self) -> None:
        """Wall clock: the loop thread runs the program; poll `progress`, then `close()`."""
        self._started = True
        self.loop.start()

    def stop(self, cause: StopCause = StopCause.OPERATOR) -> None:
        """Controlled stop now (operator, or a signal); the recording is kept."""
        self.loop.stop(StopKind.CONTROLLED, cause)
        if self._phase in (Phase.RUNNING, Phase.ARMING):
            self._phase = Phase.ENDING
        elif self._phase is Phase.WAITING:
            self._fail("stopped before the program started")

    def close(self) -> BenchResult:
        """Bring the robot to rest if the program is still running, then stop the loop, finish the recording and
        write the bench sidecar. Idempotent."""
        if self._result is not None:
            return self._result
        self._come_to_rest()
        self.loop.close()
        self.recorder.close(self.loop.stats(), self.loop.link_stats())
        if self.loop.failure is not None and self._failure is None:
            self._failure = f"control loop failed: {self.loop.failure!r}"
        completed = self._failure is None and self._cause is StopCause.PROGRAM_END
        side = bench_sidecar_path(self.path)
        self._write_sidecar(side, completed)
        self._result = BenchResult(self.path, side, completed, self._cause, self._failure)
        if isinstance(self.loop.failure, LinkLost):
            raise self.loop.failure
        return self._result

    def _come_to_rest(self) -> None:
        """A run closed early still ends with a controlled stop carried out by the loop (not just requested)."""
        if self._phase is Phase.DONE or self.loop.failure is not None:
            return
        self.stop()
        if self.fast:
            for _ in range(int(STOP_WAIT_S * self.profile.link.rate_hz)):
                if not self.step(1):
                    return
        elif self._started:
            deadline = time.monotonic() + STOP_WAIT_S
            while self._phase is not Phase.DONE and time.monotonic() < deadline and self.loop.failure is None:
                time.sleep(0.02)

    def _write_sidecar(self, side: Path, completed: bool) -> None:
        t0 = self._t0 if self._t0 is not None else 0.0
        geometry = self.profile.geometry
        meta = {
            "format": FORMAT,
            "csv": self.path.name,
            "recording_sidecar": sidecar_path(self.path).name,
            "program": {"name": self.program.name, "source": self.program.source,
                        "description": self.program.description, "duration_s": self.bound.duration_s},
            "profile": str(self.profile.path),
            "link_url": self.url,
            "fast": self.fast,
            "geometry": {"wheel_radius_m": geometry.wheel_radius_m, "track_width_m": geometry.track_width_m},
            "top_speed_mps": self.profile.envelope.top_speed_mps,
            "rate_hz": self.profile.link.rate_hz,
            "program_start_s": self._t0,
            "completed": completed,
            "cause": None if self._cause is None else self._cause.value,
            "failure": self._failure,
            "segments": [
                {"index": b.segment.index, "name": b.segment.name, "kind": b.segment.kind.value,
                 "axis": b.segment.axis.value, "bypass": b.segment.bypass,
                 "t_start_s": t0 + b.t_start_s, "t_end_s": t0 + b.t_end_s, "start": b.start, "end": b.end,
                 "amplitude": b.amplitude, "partner": b.partner, "lead_s": b.segment.lead_s,
                 "period_s": b.segment.period_s}
                for b in self.bound.segments
            ],
        }
        write_atomic(side, json.dumps(meta, indent=2) + "\n")
