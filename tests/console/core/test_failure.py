"""Finding 2 of issue 9 (the loop's half): whatever still fails inside a cycle, the loop sends the strongest stop it
can (category 0), keeps sending it, and the verb exits with its documented code (7) and one line, never a traceback.

The failure used is the one found outside: a ticks unit whose top wheel rate does not fit the wire's +-2,000,000.000
(`profile check` refuses it once issue 10's range check is in; here the profile is built past that check on purpose).
"""

from __future__ import annotations

import dataclasses
import json
from pathlib import Path

import pytest

from console.cli import main
from console.core.safety import SafetyState, StopCause
from console.profile import load_profile
from console.protocol import StopCommand, WheelCommand
from console.record import read_csv, sidecar_path
from shaping.units import WheelUnit
from tests.console.test_loop import WREN, Rig


def _overflowing_profile():
    wren = load_profile(WREN)
    units = dataclasses.replace(wren.units, unit=WheelUnit.TICKS_PER_S, ticks_per_rev=100_000.0, gear_ratio=50.0)
    return dataclasses.replace(wren, units=units)


def test_a_rate_the_wire_cannot_carry_stops_with_category_0_and_no_exception() -> None:
    rig = Rig(_overflowing_profile())
    rig.armed_at(0.05, settle_s=1.0)                 # slow: still fits
    armed = len(rig.tap.sent)
    rig.loop.request(0.4, 0.0)                       # 0.154 m/s and up no longer fit the wire
    rig.run(3.0)                                     # no exception reaches the caller
    snapshot = rig.loop.snapshot()
    assert snapshot.state is SafetyState.STOPPED and snapshot.cause is StopCause.LOOP_FAILURE
    assert isinstance(rig.loop.failure, ValueError)
    assert any("control loop failed" in e.text for e in snapshot.events)
    first_stop = next(i for i, f in enumerate(rig.tap.sent) if type(f) is StopCommand)
    assert first_stop > armed and all(type(f) is WheelCommand for f in rig.tap.sent[armed:first_stop])
    assert all(type(f) is StopCommand and f.category == 0 for f in rig.tap.sent[first_stop:])
    assert len(rig.tap.sent) - first_stop > 100      # every later cycle sends it again
    assert rig.sim.plant.wheel_radps == (0.0, 0.0)


def test_play_ends_with_exit_7_one_line_and_the_recording_kept(tmp_path: Path, capsys,
                                                               monkeypatch: pytest.MonkeyPatch) -> None:
    monkeypatch.setattr("console.verbs.play.load_profile", lambda path: _overflowing_profile())
    trace = tmp_path / "fast.csv"
    trace.write_text("t_s,v_mps,omega_radps\n0.0,0.5,0.0\n5.0,0.0,0.0\n", encoding="utf-8")
    record = tmp_path / "failed.csv"
    assert main(["play", str(WREN), str(trace), "--link", "sim", "--fast", "--yes", "--record", str(record)]) == 7
    err = capsys.readouterr().err.strip().splitlines()
    assert len(err) == 1 and "control loop failed" in err[0] and "Traceback" not in err[0]
    meta = json.loads(sidecar_path(record).read_text(encoding="utf-8"))
    assert meta["rows_written"] > 0
    assert read_csv(record)["state"][-1] == "stopped"
