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
from dataclasses import dataclass, replace
from datetime import UTC, datetime
from pathlib import Path

from console.bench.program import BoundProgram, Program
from console.core.safety import SafetyState, StopCause
from console.core.step import Snapshot, SourceStatus
from console.errors import InputError, LinkLost, OutputError
from console.files import reason, write_atomic
from console.links import is_simulated, open_link
from console.loop import ControlLoop, VirtualClock
from console.loop_process import LoopProcess
from console.profile import Profile
from console.record import Recorder, sidecar_path
from console.session import LoopHandle, bring_to_rest
from shaping.shaper import StopKind

FORMAT = "diffdeck bench 2"
"""2: each segment also as written (levels, duration, chirp), so a report rebuilds the bound segment exactly."""
TELEMETRY_WAIT_S = 2.0
"""How long a run waits for the first telemetry before giving up (the robot is not answering)."""


class Phase(enum.Enum):
    WAITING = "waiting for telemetry"
    ARMING = "arming"
    RUNNING = "running"
    ENDING = "stopping"
    DONE = "done"


@dataclass(frozen=True, slots=True)
class BenchProgress(SourceStatus):
    """The program's progress as its source reports it each cycle (it rides in the loop's snapshots)."""

    t_s: float                   # program time (0 at the first armed cycle)
    duration_s: float
    fraction: float              # 0..1
    segment_index: int
    segment_count: int
    segment_name: str
    phase: Phase
    cause: StopCause | None      # why the robot stopped (PROGRAM_END when the program ran to its end)
    program_start_s: float | None = None   # recording time of program sample 0
    failure: str | None = None   # why the program could not start (no telemetry, arming refused, stopped early)

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


class ProgramSource:
    """A bound program as the loop's request source (console.session.RequestSource): waits for telemetry, arms,
    hands over the precomputed sample of each cycle (sample-exact on the wall clock too), and ends with a controlled
    stop. Plain data only, so it can be pickled into the loop's child process."""

    def __init__(self, bound: BoundProgram, period_s: float) -> None:
        self.samples = bound.sample(period_s)
        self.period_s = period_s
        self.duration_s = bound.duration_s
        self.names = [b.segment.name for b in bound.segments]
        self.phase = Phase.WAITING
        self.t_s = 0.0
        self.t0: float | None = None
        self.k = 0
        self.cause: StopCause | None = None
        self.failure: str | None = None
        self.status = self._status()

    def poll(self, t_s: float, loop: LoopHandle) -> BenchProgress:
        self.t_s = t_s
        self._advance(t_s, loop, loop.snapshot())
        self.status = self._status()
        return self.status

    def _advance(self, t: float, loop: LoopHandle, snap: Snapshot) -> None:
        if self.phase is Phase.WAITING:
            if snap.state is SafetyState.STOPPED:
                self._fail(f"stopped before the program started ({_cause(snap)})")
            elif snap.link.telemetry_received > 0:
                loop.arm()
                self.phase = Phase.ARMING
            elif t > TELEMETRY_WAIT_S:
                self._fail(f"no telemetry from the robot within {TELEMETRY_WAIT_S:g} s")
            return
        if self.phase is Phase.ARMING:
            if snap.state is SafetyState.ARMED:
                self.t0, self.phase = t, Phase.RUNNING
            elif snap.state is SafetyState.STOPPED and snap.cause in STOPPED_FROM_OUTSIDE:
                self._fail(f"stopped before the program started ({_cause(snap)})")
                return
            elif snap.state is not SafetyState.DISARMED or t > 2 * TELEMETRY_WAIT_S:
                refusal = [e.text for e in snap.events if "arming refused" in e.text]
                self._fail(refusal[-1] if refusal else "the robot could not be armed")
                return
            else:
                return
        if self.phase is Phase.RUNNING:
            if snap.state is not SafetyState.ARMED:          # a stop from elsewhere (link, watchdog, operator)
                self.cause, self.phase = snap.cause, Phase.ENDING
                return
            k = int(round((t - (self.t0 or 0.0)) / self.period_s))
            samples = self.samples
            if k >= samples.t_s.size:
                loop.stop(StopKind.CONTROLLED, StopCause.PROGRAM_END)
                self.phase = Phase.ENDING
                return
            self.k = k
            first, second = float(samples.first[k]), float(samples.second[k])
            if samples.wheels[k]:
                loop.request_wheels(first, second)      # around the shaper (the program said so)
            else:
                loop.request(first, second)
            return
        if self.phase is Phase.ENDING and snap.state in (SafetyState.STOPPED, SafetyState.DISARMED):
            self.cause = self.cause or snap.cause
            self.phase = Phase.DONE

    def _fail(self, why: str) -> None:
        self.failure, self.phase = why, Phase.DONE

    def _status(self) -> BenchProgress:
        t = 0.0 if self.t0 is None else max(0.0, self.t_s - self.t0)
        duration = self.duration_s
        index = int(self.samples.segment[min(self.k, self.samples.segment.size - 1)])
        name = self.names[index]
        return BenchProgress(f"program {name}", f"segment {index + 1}/{len(self.names)} {name}",
                             min(t, duration), duration, min(1.0, t / duration), index, len(self.names), name,
                             self.phase, self.cause, self.t0, self.failure)


STOPPED_FROM_OUTSIDE = (StopCause.OPERATOR, StopCause.SIGNAL, StopCause.UI_STALL)
"""Stops a person (or a signal, or a stalled screen) asked for, as opposed to the robot or the link."""


def _cause(snap: Snapshot) -> str:
    return snap.cause.value if snap.cause is not None else "stop"


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
    """A program on one robot: fast (virtual clock, `step`, the loop in this process) on the simulated robot; real
    time (`start`, the loop in a child process, console.loop_process) otherwise and for the bench screen.

    Either way the program is the loop's request source (`ProgramSource`), and this object only reads its progress
    from the loop's snapshots: nothing the caller does can make the samples late.
    """

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
        self.source = ProgramSource(self.bound, self.period_s)
        self.path = recording or _recording_path(out_dir, profile, program)
        self.loop: LoopHandle = (self._local_loop(url, ui_timeout_s) if self.fast
                                 else self._child_loop(url, ui_timeout_s))
        self._result: BenchResult | None = None
        self._started = False

    def _local_loop(self, url: str, ui_timeout_s: float | None) -> ControlLoop:
        link = open_link(url, self.profile)
        try:
            self.recorder: Recorder | None = Recorder(self.path, self.profile, url)
        except (OSError, OutputError) as error:
            link.transport.close()
            if isinstance(error, OutputError):
                raise
            raise OutputError(str(self.path), f"cannot be written ({reason(error)})") from None
        return ControlLoop(self.profile, link.transport, VirtualClock(), sim=link.sim, recorder=self.recorder,
                           url=url, source=self.source, ui_timeout_s=ui_timeout_s)

    def _child_loop(self, url: str, ui_timeout_s: float | None) -> LoopProcess:
        self.recorder = None                  # the child records
        profile = replace(self.profile, link=replace(self.profile.link, url=url))
        return LoopProcess(profile, url=url, record_path=self.path, ui_timeout_s=ui_timeout_s, source=self.source)

    # -- caller side ------------------------------------------------------------------------------------------

    @property
    def progress(self) -> BenchProgress:
        """The newest progress the source reported (in this process on the virtual clock, else via the snapshot)."""
        status = self.loop.snapshot().source
        return status if isinstance(status, BenchProgress) else self.source.status

    def snapshot(self) -> Snapshot:
        return self.loop.snapshot()

    def step(self, cycles: int = 1) -> bool:
        """Virtual clock: run up to `cycles` loop cycles; False once the run is over."""
        assert isinstance(self.loop, ControlLoop)
        for _ in range(cycles):
            if self.source.phase is Phase.DONE:
                return False
            self.loop.run_cycles(1)
        return self.source.phase is not Phase.DONE

    def run_to_end(self) -> BenchResult:
        """Virtual clock: the whole program at CPU speed, then close."""
        while self.step(1000):
            pass
        return self.close()

    def start(self) -> None:
        """Wall clock: the loop runs the program; poll `progress`, then `close()`."""
        self._started = True
        self.loop.start()

    def stop(self, cause: StopCause = StopCause.OPERATOR) -> None:
        """Controlled stop now (operator, or a signal); the recording is kept."""
        self.loop.stop(StopKind.CONTROLLED, cause)

    def discard(self) -> None:
        """Before `start`: close the link and remove the (empty) recording: the operator declined the run."""
        if self._started:
            raise RuntimeError("a run that started keeps its recording")
        self.loop.close()
        if self.recorder is not None:
            self.recorder.close()
        for path in (self.path, sidecar_path(self.path)):
            path.unlink(missing_ok=True)

    def close(self) -> BenchResult:
        """Bring the robot to rest if the program is still running, then stop the loop, finish the recording and
        write the bench sidecar. Idempotent."""
        if self._result is not None:
            return self._result
        self._come_to_rest()
        self.loop.close()
        if self.recorder is not None:
            self.recorder.close(self.loop.stats(), self.loop.link_stats())
        progress = self.progress
        failure = progress.failure
        if self.loop.failure is not None and failure is None:
            failure = f"control loop failed: {self.loop.failure!r}"
        elif not progress.done and failure is None:
            failure = f"the program did not come to its end ({progress.phase.value})"
        completed = failure is None and progress.cause is StopCause.PROGRAM_END
        side = bench_sidecar_path(self.path)
        self._write_sidecar(side, progress, completed, failure)
        self._result = BenchResult(self.path, side, completed, progress.cause, failure)
        if isinstance(self.loop.failure, LinkLost):
            raise self.loop.failure
        return self._result

    def _come_to_rest(self) -> None:
        """A run closed early still ends with a controlled stop carried out by the loop (not just requested), made
        harsher if it takes longer than it should: the one `bring_to_rest` every verb uses."""
        if self.progress.done or self.loop.failure is not None or not (self.fast or self._started):
            return
        bring_to_rest(self.loop, StopKind.CONTROLLED, StopCause.OPERATOR, wait=self.wait, clock=self.clock)
        self.wait(2.0 * self.period_s)               # the source sees the stop and ends its program

    def wait(self, seconds: float) -> None:
        """Let `seconds` of the run's time pass: loop cycles on the virtual clock, sleep on the wall clock."""
        if self.fast:
            assert isinstance(self.loop, ControlLoop)
            self.loop.run_cycles(max(1, round(seconds / self.period_s)))
        else:
            time.sleep(seconds)

    def clock(self) -> float:
        """The run's time: the loop's own on the virtual clock, the wall's otherwise."""
        return self.loop.snapshot().t_s if self.fast else time.monotonic()

    def _write_sidecar(self, side: Path, progress: BenchProgress, completed: bool, failure: str | None) -> None:
        t0 = progress.program_start_s if progress.program_start_s is not None else 0.0
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
            "program_start_s": progress.program_start_s,
            "completed": completed,
            "cause": None if progress.cause is None else progress.cause.value,
            "failure": failure,
            "segments": [bound.shifted(t0).to_json() for bound in self.bound.segments],
        }
        write_atomic(side, json.dumps(meta, indent=2) + "\n")
