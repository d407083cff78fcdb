"""Recordings for the replay tests, made by the real loop, shaper, simulated robot and recorder on a virtual clock.

The scene (`drive_scene`, about 10.5 s at 100 Hz) has every kind of event replay navigates by: arming, a request
inside the envelope, one beyond the top speed (the speed limit binds), an operator stop, re-arming, a firmware fault
(the loop stops on it) and its clearing. `SCENE` says when each part starts, so tests can check the replay against
what was done, not against the replay's own reading.
"""

from __future__ import annotations

from dataclasses import dataclass
from pathlib import Path

import pytest

from console.core.safety import StopCause
from console.loop import ControlLoop, VirtualClock
from console.profile import Profile, load_profile
from console.record import Recorder
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
