"""The link scheme registry: the simulated robot as a scheme, pyserial for the rest, and the wire-log wrapper."""

from __future__ import annotations

import ast
from pathlib import Path

import pytest

from console.errors import InputError
from console.links import is_simulated, open_link
from console.loop import ControlLoop, VirtualClock
from console.profile import load_profile
from console.transport import SerialTransport

WREN = Path(__file__).resolve().parents[2] / "profiles" / "wren.toml"


def test_sim_is_a_scheme_with_its_robot_and_pyserial_takes_the_rest() -> None:
    profile = load_profile(WREN)
    link = open_link("sim", profile)
    assert link.sim is not None and is_simulated("sim") and not is_simulated("loop://")
    link.transport.close()
    loop = open_link("loop://", profile)
    assert isinstance(loop.transport, SerialTransport) and loop.sim is None
    loop.transport.close()
    with pytest.raises(InputError):
        open_link("nosuchscheme://x", profile)


def test_trace_logs_every_chunk_both_ways(tmp_path: Path, monkeypatch: pytest.MonkeyPatch) -> None:
    monkeypatch.chdir(tmp_path)
    profile = load_profile(WREN)
    link = open_link("trace+sim", profile)
    assert is_simulated("trace+sim") and link.sim is not None
    loop = ControlLoop(profile, link.transport, VirtualClock(), sim=link.sim, url="trace+sim")
    loop.run_cycles(50)
    loop.close()
    log = next((tmp_path / "recordings").glob("wire-*.log")).read_text(encoding="ascii").splitlines()
    sent = [ast.literal_eval(line.split(" ", 2)[2]) for line in log[1:] if line.split(" ")[1] == ">"]
    received = b"".join(ast.literal_eval(line.split(" ", 2)[2]) for line in log[1:] if line.split(" ")[1] == "<")
    assert len(sent) == 50 and all(chunk.startswith(b"@1 H ") for chunk in sent)      # disarmed: heartbeats
    assert b"@1 T " in received
