"""The drive console driven through Textual's Pilot, on the simulated robot and a virtual clock.

Every key goes through the real bindings, the real control loop, the real shaper and the simulated firmware; the
test only decides when loop time passes (`rig.advance`).
"""

from __future__ import annotations

import dataclasses
import io
import math

import pytest
from rich.console import Console

from console.core.safety import SafetyState, StopCause
from console.ui.app import DriveApp, DriveScreen
from console.ui.driving import DriveMode
from console.ui.screens import CautionScreen, HelpScreen, help_text
from console.ui.widgets import SafetyBanner
from shaping.shaper import StopKind
from tests.console.ui.conftest import Rig, make_rig

SIZE = (120, 40)


def jerk_limited_rise_s(dv: float, accel: float, jerk: float) -> float:
    """Shortest time to change a velocity by dv from and to zero acceleration with |a| <= accel, |j| <= jerk.

    Common practice (the "double S" velocity profile, e.g. L. Biagiotti and C. Melchiorri, Trajectory Planning for
    Automatic Machines and Robots, Springer 2008, sec. 3.4): T = dv/a + a/j when the acceleration limit is reached
    (dv >= a^2/j), else T = 2 sqrt(dv/j).
    """
    dv = abs(dv)
    return dv / accel + accel / jerk if dv >= accel * accel / jerk else 2.0 * math.sqrt(dv / jerk)


async def arm(rig: Rig, pilot) -> None:
    rig.advance(0.2)                       # first telemetry: arming needs a live link
    await pilot.press("a", "enter")
    rig.advance(0.04)
    assert rig.snap.state is SafetyState.ARMED


def rendered_text(renderable: object) -> str:
    console = Console(width=100, record=True, file=io.StringIO())
    console.print(renderable)
    return " ".join(console.export_text().split())


def banner_text(app: DriveApp) -> str:
    """The banner's words, its wrapped lines joined again."""
    return " ".join(" ".join(app.drive_screen.query_one(SafetyBanner).text_lines()).split())


async def test_arming_takes_the_two_key_sequence(rig: Rig) -> None:
    async with rig.app.run_test(size=SIZE) as pilot:
        rig.advance(0.2)
        await pilot.press("enter")                     # confirm without the arm key: nothing
        rig.advance(0.1)
        assert rig.snap.state is SafetyState.DISARMED
        await pilot.press("a")                         # arm key alone: a window, no arming
        rig.advance(0.1)
        assert rig.snap.state is SafetyState.DISARMED
        assert "ENTER" in banner_text(rig.app)
        rig.advance(rig.app.drive.arm_window_s + 0.1)  # window runs out
        await pilot.press("enter")
        rig.advance(0.1)
        assert rig.snap.state is SafetyState.DISARMED
        await pilot.press("up")                        # driving keys do nothing while disarmed
        rig.advance(0.1)
        assert rig.snap.shaped.v_req_mps == 0.0
        await pilot.press("a", "enter")
        rig.advance(0.04)
        assert rig.snap.state is SafetyState.ARMED
        assert "ARMED" in banner_text(rig.app)
        assert rig.snap.shaped.v_req_mps == 0.0        # arming never starts with a request


async def test_nudges_and_presets_change_the_request(latched_rig: Rig) -> None:
    rig = latched_rig
    drive = rig.app.drive
    async with rig.app.run_test(size=SIZE) as pilot:
        await arm(rig, pilot)
        await pilot.press("up", "up", "up")
        rig.advance(0.04)
        assert rig.snap.shaped.v_req_mps == pytest.approx(3 * drive.speed_step_mps)
        await pilot.press("down")
        await pilot.press("left", "left")
        rig.advance(0.04)
        assert rig.snap.shaped.v_req_mps == pytest.approx(2 * drive.speed_step_mps)
        assert rig.snap.shaped.omega_req_radps == pytest.approx(2 * drive.turn_step_radps)   # left = +omega (CCW)
        await pilot.press("right")
        rig.advance(0.04)
        assert rig.snap.shaped.omega_req_radps == pytest.approx(drive.turn_step_radps)
        await pilot.press("7")
        rig.advance(0.04)
        assert rig.snap.shaped.v_req_mps == pytest.approx(0.7 * rig.profile.envelope.top_speed_mps)
        for _ in range(40):                            # nudging never builds up past the envelope
            await pilot.press("up")
        rig.advance(0.04)
        assert rig.snap.shaped.v_req_mps == pytest.approx(rig.profile.envelope.top_speed_mps)
        await pilot.press("z")
        rig.advance(0.04)
        assert (rig.snap.shaped.v_req_mps, rig.snap.shaped.omega_req_radps) == (0.0, 0.0)


async def test_shaped_speed_follows_in_the_time_the_limits_allow(latched_rig: Rig) -> None:
    rig = latched_rig
    limits = rig.profile.limits
    async with rig.app.run_test(size=SIZE) as pilot:
        await arm(rig, pilot)
        await pilot.press("5")
        target = 0.5 * rig.profile.envelope.top_speed_mps
        rise = jerk_limited_rise_s(target, limits.accel_mps2, limits.jerk_mps3)
        period = 1.0 / rig.profile.link.rate_hz
        start = rig.snap.t_s
        while rig.snap.t_s - start < 0.9 * rise:       # not sooner than the limits allow ...
            rig.advance(0.04)
            assert rig.snap.shaped.v_mps < target - 1e-3
        while rig.snap.t_s - start < rise + 2 * period:
            rig.advance(0.04)
        assert rig.snap.shaped.v_mps == pytest.approx(target, abs=1e-6)   # ... and no later
        await pilot.pause()
        assert "+0.50" in "\n".join(rig.app.drive_screen.speed_gauge.text_lines())


async def test_shaped_turn_rate_follows_in_the_time_the_limits_allow(latched_rig: Rig) -> None:
    rig = latched_rig
    limits = rig.profile.limits
    async with rig.app.run_test(size=SIZE) as pilot:
        await arm(rig, pilot)
        await pilot.press("left", "left", "left", "left")      # spin on the spot
        target = 4 * rig.app.drive.turn_step_radps
        rise = jerk_limited_rise_s(target, limits.turn_accel_radps2, limits.turn_jerk_radps3)
        start = rig.snap.t_s
        while rig.snap.t_s - start < 0.9 * rise:
            rig.advance(0.04)
            assert rig.snap.shaped.omega_radps < target - 1e-3
        while rig.snap.t_s - start < rise + 2.0 / rig.profile.link.rate_hz:
            rig.advance(0.04)
        assert rig.snap.shaped.omega_radps == pytest.approx(target, abs=1e-6)
        assert rig.snap.shaped.v_mps == pytest.approx(0.0, abs=1e-9)


@pytest.mark.parametrize("key, kind", [("space", StopKind.CONTROLLED), ("x", StopKind.FAST)])
async def test_stop_keys_work_in_every_state(key: str, kind: StopKind) -> None:
    rig = make_rig(mode=DriveMode.LATCHED)
    async with rig.app.run_test(size=SIZE) as pilot:
        rig.advance(0.2)
        await pilot.press(key)                                 # disarmed
        rig.advance(0.04)
        assert (rig.snap.state, rig.snap.cause) == (SafetyState.STOPPED, StopCause.OPERATOR)
        await arm(rig, pilot)                                  # stopped -> armed again
        await pilot.press("8")
        rig.advance(2.0)
        assert rig.snap.shaped.v_mps > 0.7
        await pilot.press(key)                                 # armed and moving
        rig.advance(0.04)
        assert rig.snap.state is SafetyState.STOPPING
        assert rig.snap.shaped.stopping is kind
        assert "STOPPING" in banner_text(rig.app) and "cause: operator" in banner_text(rig.app)
        await pilot.press(key)                                 # stopping: still accepted
        rig.advance(3.0)
        assert rig.snap.state is SafetyState.STOPPED
        assert rig.snap.shaped.v_mps == 0.0
        await pilot.press(key)                                 # stopped
        rig.advance(0.04)
        assert rig.snap.state is SafetyState.STOPPED
        await pilot.press("up")                                # no motion after a stop without re-arming
        rig.advance(0.5)
        assert rig.snap.shaped.v_req_mps == 0.0 and rig.snap.shaped.v_mps == 0.0


async def test_stop_escalates_and_works_above_the_help_overlay(latched_rig: Rig) -> None:
    rig = latched_rig
    async with rig.app.run_test(size=SIZE) as pilot:
        await arm(rig, pilot)
        await pilot.press("9")
        rig.advance(2.5)
        await pilot.press("question_mark")
        await pilot.pause()
        assert isinstance(rig.app.screen, HelpScreen)
        await pilot.press("up")                                 # driving keys are dead under the overlay
        rig.advance(0.04)
        assert rig.snap.shaped.v_req_mps == pytest.approx(0.9 * rig.profile.envelope.top_speed_mps)
        await pilot.press("space")                              # the stop keys are not
        rig.advance(0.04)
        assert rig.snap.state is SafetyState.STOPPING
        assert rig.snap.shaped.stopping is StopKind.CONTROLLED
        await pilot.press("x")                                  # controlled -> fast while stopping
        rig.advance(0.04)
        assert rig.snap.shaped.stopping is StopKind.FAST
        assert isinstance(rig.app.screen, HelpScreen)           # and the overlay stays where it was
        v0 = 0.9 * rig.profile.envelope.top_speed_mps
        limits = rig.profile.limits
        rig.advance(jerk_limited_rise_s(v0, limits.stop_decel_mps2, limits.stop_jerk_mps3) + 0.1)
        assert rig.snap.state is SafetyState.STOPPED


async def test_hold_mode_request_decays_after_the_deadman_time(rig: Rig) -> None:
    drive = rig.app.drive
    limits = rig.profile.limits
    async with rig.app.run_test(size=SIZE) as pilot:
        await arm(rig, pilot)
        await pilot.press("2")              # one press, no repeat measured yet
        held = 0.2 * rig.profile.envelope.top_speed_mps
        rig.advance(0.04)
        assert rig.snap.shaped.v_req_mps == pytest.approx(held)
        rig.advance(drive.deadman_s - 0.08)  # no repeat came: the request lasts for the deadman time ...
        assert rig.snap.shaped.v_req_mps == pytest.approx(held)
        assert rig.snap.state is SafetyState.ARMED
        rig.advance(0.12)                    # ... then falls to zero; the robot stays armed
        assert rig.snap.shaped.v_req_mps == 0.0
        assert rig.snap.state is SafetyState.ARMED
        v_at_release = rig.snap.shaped.v_mps
        rig.advance(jerk_limited_rise_s(v_at_release, limits.decel_mps2, limits.jerk_mps3) + 0.3)
        assert rig.snap.shaped.v_mps == pytest.approx(0.0, abs=1e-6)
        events = [text for _, text, _ in rig.app.drive_screen.event_log.lines]
        assert any("hold released" in text for text in events)


async def test_latched_mode_keeps_the_request(latched_rig: Rig) -> None:
    rig = latched_rig
    async with rig.app.run_test(size=SIZE) as pilot:
        await arm(rig, pilot)
        await pilot.press("up", "up")
        rig.advance(5.0)
        assert rig.snap.shaped.v_req_mps == pytest.approx(2 * rig.app.drive.speed_step_mps)
        await pilot.press("m")                            # switching mode zeroes the request
        rig.advance(0.04)
        assert rig.snap.shaped.v_req_mps == 0.0
        assert rig.app.drive.mode.value == "hold"


async def test_link_loss_is_shown_and_stops_the_robot(latched_rig: Rig) -> None:
    rig = latched_rig
    async with rig.app.run_test(size=SIZE) as pilot:
        await arm(rig, pilot)
        await pilot.press("6")
        rig.advance(2.0)
        assert rig.sim.plant.wheel_radps[0] > 5.0
        rig.robot_end.close()                              # the cable is pulled
        rig.advance(0.2)
        assert rig.snap.state in (SafetyState.STOPPING, SafetyState.STOPPED)
        assert rig.snap.cause is StopCause.LINK_LOST
        assert rig.snap.shaped.v_mps == 0.0                # commands go to zero at once
        await pilot.pause()
        assert "cause: link lost" in banner_text(rig.app)
        rig.advance(1.5)                                   # the robot's watchdog brings its wheels to rest
        left, right = rig.sim.plant.wheel_radps
        assert abs(left) < 0.05 and abs(right) < 0.05
        await pilot.press("a", "enter")                    # and it cannot be armed on a dead link
        rig.advance(0.1)
        assert rig.snap.state is SafetyState.STOPPED
        await pilot.pause()
        banner = banner_text(rig.app)                      # issue 9, finding 5: only what is known
        assert "link lost, robot state unknown" in banner
        assert "at rest" not in banner and "re-arm" not in banner
        wheels = "\n".join(rig.app.drive_screen.wheel_panel.text_lines())
        assert "s old)" in wheels                          # the last measured values, with their age


async def test_a_fault_with_turning_wheels_is_not_at_rest_and_flags_are_named(latched_rig: Rig) -> None:
    """Issue 9, finding 5: a robot reporting FAULT while its wheels still turn is never shown "at rest", and the
    arming refusal names the flag instead of a number."""
    rig = latched_rig
    async with rig.app.run_test(size=SIZE) as pilot:
        await arm(rig, pilot)
        await pilot.press("6")
        rig.advance(2.0)
        rig.sim.set_fault(True)
        rig.advance(0.2)
        await pilot.pause()
        assert rig.snap.state is SafetyState.STOPPED and rig.snap.cause is StopCause.FAULT
        banner = banner_text(rig.app)
        assert "cannot arm: the robot reports FAULT" in banner and "re-arm" not in banner
        assert "FAULT" in "\n".join(rig.app.drive_screen.link_panel.text_lines())
        coasting = dataclasses.replace(rig.snap, left_meas_radps=6.0, right_meas_radps=5.5)   # fresh telemetry
        detail = DriveScreen._banner_detail(coasting, rig.app.drive, rig.clock.now())
        assert "wheels still turning" in detail and "at rest" not in detail
        at_rest = dataclasses.replace(rig.snap, left_meas_radps=0.0, right_meas_radps=0.0)
        assert DriveScreen._banner_detail(at_rest, rig.app.drive, rig.clock.now()).startswith("at rest")


async def test_a_silent_ui_stops_the_robot(latched_rig: Rig) -> None:
    rig = latched_rig
    async with rig.app.run_test(size=SIZE) as pilot:
        await arm(rig, pilot)
        await pilot.press("5")
        rig.advance(1.5)
        rig.advance(1.0, ui=False)                         # the screen stops ticking
        assert rig.snap.cause is StopCause.UI_STALL
        assert rig.snap.state in (SafetyState.STOPPING, SafetyState.STOPPED)


def _key_names(bindings) -> set[str]:
    names = set()
    for binding in bindings:
        names.update(key.strip() for key in binding.key.split(","))
    return names


async def test_help_overlay_lists_every_binding_and_the_key_release_caveat(rig: Rig) -> None:
    async with rig.app.run_test(size=SIZE) as pilot:
        await pilot.press("f1")
        await pilot.pause()
        assert isinstance(rig.app.screen, HelpScreen)
        listed = rendered_text(help_text(rig.app.drive.deadman_s))
        spoken = {"question_mark": "?", "left_square_bracket": "[", "right_square_bracket": "]", "up": "up",
                  "down": "down", "left": "left", "right": "right", "enter": "enter", "ctrl+c": "ctrl+c"}
        for key in _key_names(DriveApp.BINDINGS) | _key_names(DriveScreen.BINDINGS):
            shown = "1 … 9" if key in "123456789" and len(key) == 1 else spoken.get(key, key)
            assert shown in listed, f"key {key!r} is bound but not in the help overlay"
        text = rendered_text(help_text(rig.app.drive.deadman_s))
        assert "key-release" in text and "auto-repeat" in text and "0.70 s" in text
        await pilot.press("escape")
        await pilot.pause()
        assert isinstance(rig.app.screen, DriveScreen)


async def test_real_link_asks_for_the_cautions_first() -> None:
    rig = make_rig(real_link=True)
    async with rig.app.run_test(size=SIZE) as pilot:
        await pilot.pause()
        assert isinstance(rig.app.screen, CautionScreen)
        text = str(rig.app.screen.query_one("#caution-text").render())
        assert "emergency stop" in text and "wheels off the ground" in text
        rig.advance(0.2)
        await pilot.press("a", "enter")                    # no arming behind the cautions
        rig.advance(0.1)
        assert rig.snap.state is SafetyState.DISARMED
        await pilot.press("y")
        await pilot.pause()
        assert isinstance(rig.app.screen, DriveScreen)
        await pilot.press("a", "enter")
        rig.advance(0.04)
        assert rig.snap.state is SafetyState.ARMED


async def test_latched_mode_needs_a_keepalive_and_counts_it_down() -> None:
    """Issue 9, finding 7: operator silence in latched mode is a controlled stop (cause deadman) after the keep-alive
    time, with the time left on the banner; k (or any key) renews it."""
    rig = make_rig(mode=DriveMode.LATCHED, keepalive_s=3.0)
    async with rig.app.run_test(size=SIZE) as pilot:
        await arm(rig, pilot)
        await pilot.press("3")
        rig.advance(2.0)
        await pilot.pause()
        assert "k in 1 s or it stops" in banner_text(rig.app)
        await pilot.press("k")
        rig.advance(2.5)
        assert rig.snap.state is SafetyState.ARMED and rig.snap.shaped.v_mps > 0.0     # renewed by k
        rig.advance(1.0)
        assert rig.snap.state in (SafetyState.STOPPING, SafetyState.STOPPED)
        assert rig.snap.cause is StopCause.DEADMAN
        assert any("stop (deadman)" in e.text and "controlled" in e.text for e in rig.snap.events)


async def test_after_a_link_loss_the_link_can_be_reopened_and_must_be_armed_again(latched_rig: Rig) -> None:
    """Issue 9: after a link loss the console offers to reopen the same link (r, confirmed with enter); the robot's
    state is unknown until telemetry is back, and moving needs a new arming."""
    rig = latched_rig
    async with rig.app.run_test(size=SIZE) as pilot:
        await arm(rig, pilot)
        await pilot.press("3")
        rig.advance(1.0)
        rig.robot_end.close()                              # the cable is pulled
        rig.advance(0.3)
        await pilot.pause()
        assert "reconnect: r, enter" in banner_text(rig.app)
        await pilot.press("r")
        rig.advance(0.04)
        await pilot.pause()
        assert "press ENTER now to reopen it" in banner_text(rig.app)
        await pilot.press("enter")
        for _ in range(100):                               # the link opens on a helper thread
            rig.advance(0.04)
            if rig.snap.link.lost is None and rig.snap.link.telemetry_received > 0:
                break
        assert rig.snap.link.lost is None and rig.snap.link.telemetry_received > 0
        assert rig.snap.state is SafetyState.STOPPED       # reopening never arms
        assert any("link reopened" in e.text for e in rig.snap.events)
        await pilot.pause()
        assert "re-arm: a, enter" in banner_text(rig.app)
        await pilot.press("a", "enter")
        rig.advance(0.1)
        assert rig.snap.state is SafetyState.ARMED
        await pilot.press("3")
        rig.advance(1.5)
        assert rig.snap.shaped.v_mps > 0.0 and rig.snap.left_meas_radps > 0.0
