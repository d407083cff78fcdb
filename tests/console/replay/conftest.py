"""Recordings for the replay tests, made by the real loop, shaper, simulated robot and recorder on a virtual clock.

The scene (`drive_scene`, about 10.5 s at 100 Hz) has every kind of event replay navigates by: arming, a request
inside the envelope, one beyond the top speed (the speed limit binds), an operator stop, re-arming, a firmware fault
(the loop stops on it) and its clearing. `SCENE` says when each part starts, so tests can check the replay against
what was done, not against the replay's own reading.
"""

from __future__ import annotations

import json
from dataclasses import dataclass
from pathlib import Path

import pytest

from console.core.safety import StopCause
from console.core.step import Snapshot
from console.loop import ControlLoop, VirtualClock
from console.profile import Profile, load_profile
from console.record import Recorder, sidecar_path
from console.sim.firmware import SimRobot
from console.transport import memory_pair
from shaping.shaper import StopKind

ROOT = Path(__file__).resolve().parents[3]
WREN = ROOT / "profiles" / "wren.toml"
BRAMBLE = ROOT / "profiles" / "bramble.toml"


@dataclass(frozen=True)
class Scene:
    """Loop times (s) at which the script did each thing (requests take effect on the next cycle)."""

    armed_s: float = 0.5
    cruise_mps: float = 0.5
    beyond_s: float = 2.5            # request 1.6 m/s: beyond wren's speed limit (1.0 m/s)
    beyond_mps: float = 1.6
    stop_s: float = 4.5              # operator: controlled stop
    rearm_s: float = 6.5
    fault_s: float = 8.0             # firmware fault injected while driving at cruise_mps
    clear_s: float = 9.5
    end_s: float = 10.5


SCENE = Scene()


def _run_until(loop: ControlLoop, t_s: float) -> None:
    period = 1.0 / loop.profile.link.rate_hz
    cycles = round((t_s - loop.snapshot().t_s) / period)
    if cycles > 0:
        loop.run_cycles(cycles)


def drive_scene(path: Path, profile: Profile | None = None, scene: Scene = SCENE) -> Path:
    """Record the scene into `path` (CSV + sidecar); returns the path."""
    profile = profile or load_profile(WREN)
    console_end, robot_end = memory_pair()
    sim = SimRobot(profile, robot_end)
    recorder = Recorder(path, profile, "sim")
    loop = ControlLoop(profile, console_end, VirtualClock(), sim=sim, recorder=recorder, url="sim")
    _run_until(loop, scene.armed_s)
    loop.arm()
    loop.run_cycles(1)
    loop.request(scene.cruise_mps, 0.4)
    _run_until(loop, scene.beyond_s)
    loop.request(scene.beyond_mps, 0.0)
    _run_until(loop, scene.stop_s)
    loop.stop(StopKind.CONTROLLED, StopCause.OPERATOR)
    _run_until(loop, scene.rearm_s)
    loop.arm()
    loop.run_cycles(1)
    loop.request(scene.cruise_mps, 0.0)
    _run_until(loop, scene.fault_s)
    sim.set_fault(True)
    _run_until(loop, scene.clear_s)
    sim.set_fault(False)
    _run_until(loop, scene.end_s)
    loop.close()
    recorder.close(loop.stats(), loop.link_stats())
    return path


@pytest.fixture(scope="session")
def scene_recording(tmp_path_factory: pytest.TempPathFactory) -> Path:
    """One recording of the scene for the whole session (tests that change it copy it first)."""
    return drive_scene(tmp_path_factory.mktemp("replay") / "scene.csv")


@dataclass(frozen=True)
class CauseScene:
    """Loop times (s) of the stop-cause scene: every drive ramps from rest (the acceleration and jerk limits bind),
    the last one asks beyond the top speed (the speed limit binds), and each stop has another cause. The keep-alives
    (operator) and heartbeats (UI) are sent every cycle except where said."""

    operator_timeout_s: float = 0.3
    ui_timeout_s: float = 0.5
    armed_s: float = 0.5
    cruise_mps: float = 0.5
    operator_stop_s: float = 3.0     # the stop key: controlled stop
    rearm_s: float = 5.0
    silent_operator_s: float = 7.0   # keep-alives end: deadman after operator_timeout_s (controlled stop)
    rearm_again_s: float = 9.0       # keep-alives again; request beyond_mps
    beyond_mps: float = 1.6          # beyond wren's speed limit (1.0 m/s)
    silent_all_s: float = 11.0       # both end: deadman first, then the UI stall (fast, harsher) replaces it
    end_s: float = 13.0


CAUSE_SCENE = CauseScene()


def drive_cause_scene(path: Path, scene: CauseScene = CAUSE_SCENE) -> tuple[Path, list[Snapshot]]:
    """Record the stop-cause scene into `path`; returns the path and the loop's own snapshot after every cycle (what
    the loop knew, taken here, outside the recorder)."""
    profile = load_profile(WREN)
    console_end, robot_end = memory_pair()
    loop = ControlLoop(profile, console_end, VirtualClock(), sim=SimRobot(profile, robot_end),
                       recorder=(recorder := Recorder(path, profile, "sim")), url="sim",
                       operator_timeout_s=scene.operator_timeout_s, ui_timeout_s=scene.ui_timeout_s)
    period = 1.0 / profile.link.rate_hz
    script = {round(t / period): (action, v) for t, action, v in (
        (scene.armed_s, "arm", scene.cruise_mps), (scene.operator_stop_s, "stop", 0.0),
        (scene.rearm_s, "arm", scene.cruise_mps), (scene.rearm_again_s, "arm", scene.beyond_mps))}
    seen: list[Snapshot] = []
    for k in range(round(scene.end_s / period)):
        t = k * period
        silent_operator = scene.silent_operator_s <= t < scene.rearm_again_s or t >= scene.silent_all_s
        if not silent_operator:
            loop.operator_alive()
        if t < scene.silent_all_s:
            loop.ui_alive()
        action, v = script.get(k, (None, 0.0))
        if action == "arm":
            loop.arm()
            loop.request(v, 0.0)         # taken after the arming cycle's release frame (W 0, 0)
        elif action == "stop":
            loop.stop(StopKind.CONTROLLED, StopCause.OPERATOR)
        loop.run_cycles(1)
        seen.append(loop.snapshot())
    loop.close()
    recorder.close(loop.stats(), loop.link_stats())
    return path, seen


def without_columns(source: Path, target: Path, drop: tuple[str, ...]) -> Path:
    """`source` with the columns `drop` left out (the sidecar is not copied)."""
    lines = source.read_text(encoding="utf-8").splitlines()
    header = lines[0].split(",")
    keep = [i for i, name in enumerate(header) if name not in drop]
    target.write_text("\n".join(",".join(line.split(",")[i] for i in keep) for line in lines) + "\n",
                      encoding="utf-8")
    return target


def old_format(source: Path, target: Path, drop: tuple[str, ...] = ("cause", "bound")) -> Path:
    """`source` as a version before the cause and bound columns wrote it: those columns left out, the sidecar's
    format "diffdeck recording 1"."""
    old = without_columns(source, target, drop)
    meta = json.loads(sidecar_path(source).read_text(encoding="utf-8"))
    meta["format"] = "diffdeck recording 1"
    meta["columns"] = [name for name in meta["columns"] if name not in drop]
    sidecar_path(old).write_text(json.dumps(meta), encoding="utf-8")
    return old
