"""The bench screen runs a program in real time on the simulated robot, shows it, and stops on the stop key."""

from __future__ import annotations

from pathlib import Path

from console.bench.program import parse_program
from console.bench.recording import read_recording
from console.bench.run import BenchRun
from console.core.safety import SafetyState, StopCause
from console.profile import load_profile
import pytest
from textual.widgets import Static

from console.ui.bench_screen import UI_TIMEOUT_S, BenchApp
from console.ui.widgets import SafetyBanner, TracePlot

ROOT = Path(__file__).resolve().parents[3]
SHORT = {"program": {"name": "short"}, "segment": [
    {"kind": "step", "to": "20%", "lead_s": 0.2, "duration_s": 1.0},
    {"kind": "hold", "duration_s": 0.5},
]}


async def _until(app: BenchApp, pilot, done, limit_s: float = 20.0) -> None:
    for _ in range(int(limit_s / 0.05)):
        if done():
            return
        await pilot.pause(0.05)
    raise AssertionError("the bench screen did not get there in time")


async def test_bench_screen_runs_the_program_to_its_end(tmp_path: Path) -> None:
    program = parse_program(SHORT, "test program", "test")
    run = BenchRun(load_profile(ROOT / "profiles" / "wren.toml"), program, out_dir=tmp_path, fast=False,
                   ui_timeout_s=UI_TIMEOUT_S)
    app = BenchApp(run)
    async with app.run_test() as pilot:
        await _until(app, pilot, lambda: run.snapshot().state is SafetyState.ARMED)
        await pilot.pause(0.5)
        assert len(app.query_one(TracePlot).samples) > 5
        assert "ARMED" in "".join(app.query_one(SafetyBanner).text_lines()).upper()
        await _until(app, pilot, lambda: app.result is not None)
        await pilot.press("q")
    assert app.return_value == 0
    result = app.finish()
    assert result.completed and result.cause is StopCause.PROGRAM_END
    assert len(read_recording(result.recording).segments) == 2


async def test_the_stop_key_stops_under_control_and_keeps_the_recording(tmp_path: Path) -> None:
    program = parse_program(SHORT, "test program", "test")
    run = BenchRun(load_profile(ROOT / "profiles" / "wren.toml"), program, out_dir=tmp_path, fast=False,
                   ui_timeout_s=UI_TIMEOUT_S)
    app = BenchApp(run)
    async with app.run_test() as pilot:
        await _until(app, pilot, lambda: run.progress.t_s > 0.5)
        await pilot.press("space")
        await _until(app, pilot, lambda: app.result is not None)
        assert run.snapshot().state is SafetyState.STOPPED
        await pilot.press("q")
    assert app.return_value == 130
    result = app.finish()
    assert not result.completed and result.cause is StopCause.OPERATOR
    assert read_recording(result.recording).data["v_mps"][-1] == 0.0


@pytest.mark.parametrize(("size", "plot_shown"), [((80, 24), False), ((120, 40), True)])
async def test_the_screen_fits_its_terminal(tmp_path: Path, size: tuple[int, int], plot_shown: bool) -> None:
    """The plot is drawn in its own width (it once drew as if the screen were three times wider) or not at all
    below 30 rows, and the stop keys' line is always on screen."""
    program = parse_program(SHORT, "test program", "test")
    run = BenchRun(load_profile(ROOT / "profiles" / "wren.toml"), program, out_dir=tmp_path, fast=False,
                   ui_timeout_s=UI_TIMEOUT_S)
    app = BenchApp(run)
    async with app.run_test(size=size) as pilot:
        await _until(app, pilot, lambda: run.progress.t_s > 0.3)
        plot, keys = app.query_one(TracePlot), app.query_one("#bench-keys", Static)
        assert plot.display is plot_shown
        if plot_shown:
            assert plot.region.right <= size[0] and plot.region.height >= 6
            assert all(len(line) <= plot.size.width for line in plot.text_lines())
        assert keys.region.height >= 1 and keys.region.bottom <= size[1]
        assert "space: stop" in str(keys.render())
        await pilot.press("q")
        await _until(app, pilot, lambda: app.result is not None)
        await pilot.press("q")
    app.finish()
