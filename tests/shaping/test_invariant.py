"""The shaper's invariant, checked from outside: every emitted sample keeps every limit of the profile, for any
request sequence, at any rate from 10 to 1000 Hz (with jittered time steps), in both modes, and the output always
arrives at the enveloped target of the last request.

Nothing here uses the project's envelope helpers: the limits are written out from the unicycle model of a
differential drive, v = r (wR + wL) / 2 and omega = r (wR - wL) / W, so a wheel turns at (v -+ omega W / 2) / r and
accelerates at (a -+ alpha W / 2) / r; the sideways (centripetal) acceleration on an arc is |v x omega|.
Source: R. Siegwart, I. Nourbakhsh, D. Scaramuzza, Introduction to Autonomous Mobile Robots, 2nd ed., MIT Press,
2011, chapter 3 (differential-drive kinematics), from memory.

Three searches, each tuned to a way the limits were once broken (random profiles and traces all the same):
any traces with stops; one axis starting while the other is still accelerating, on robots whose wheel-acceleration
limit binds; and re-plans while leaving an arc, on robots whose sideways limit binds and whose jerk is slow.
"""

from __future__ import annotations

import math
import os
from dataclasses import dataclass

from hypothesis import HealthCheck, given, settings, target
from hypothesis import strategies as st

from shaping.envelope import Limits
from shaping.geometry import Geometry
from shaping.shaper import Mode, Shaped, Shaper, StopKind

REL = 1e-9  # the invariant's allowance: rounding only
RATE_LIMITS = ("speed", "reverse speed", "turn rate", "left wheel rate", "right wheel rate", "wheel rate", "sideways")
RATES_HZ = [10.0, 50.0, 100.0, 200.0, 1000.0]
# a request: (speed, turn rate) as fractions of the top speeds and turn rate, None keeping that axis's previous
# request; and how long it is held in s (0: one cycle, so a new request every cycle)
Request = tuple[float | None, float | None, float]


@dataclass(frozen=True)
class Robot:
    r: float
    track: float
    limits: Limits


def enveloped(robot: Robot, v: float, omega: float) -> tuple[float, float]:
    """The request scaled by the largest common factor <= 1 that keeps every rate limit (curvature kept)."""
    lim, r, half = robot.limits, robot.r, robot.track / 2
    factor = 1.0
    if v > 0:
        factor = min(factor, lim.speed_mps / v)
    if v < 0:
        factor = min(factor, lim.reverse_speed_mps / -v)
    if omega != 0:
        factor = min(factor, lim.turn_rate_radps / abs(omega))
    fastest_wheel = (abs(v) + abs(omega) * half) / r
    if fastest_wheel > 0:
        factor = min(factor, lim.wheel_rate_radps / fastest_wheel)
    if lim.sideways_accel_mps2 is not None and v * omega != 0:
        factor = min(factor, math.sqrt(lim.sideways_accel_mps2 / abs(v * omega)))
    return v * factor, omega * factor


def broken_limits(robot: Robot, out: Shaped, use: dict[str, float]) -> list[str]:
    """Every limit this sample breaks, by name, with its value and the limit (written out here, not imported).

    `use` keeps the largest value / limit seen per limit, for hypothesis to steer towards (targeted search).
    """
    lim, r, half = robot.limits, robot.r, robot.track / 2
    v, w, a, alpha = out.v_mps, out.omega_radps, out.a_mps2, out.alpha_radps2
    broken: list[str] = []

    def check(name: str, value: float, limit: float) -> None:
        if not math.isfinite(value) or value > limit * (1 + REL):
            broken.append(f"{name} {value:.9g} > {limit:.9g}")
        use[name] = max(use.get(name, 0.0), value / limit)

    check("speed", v, lim.speed_mps)
    check("reverse speed", -v, lim.reverse_speed_mps)
    check("turn rate", abs(w), lim.turn_rate_radps)
    check("left wheel rate", abs((v - w * half) / r), lim.wheel_rate_radps)
    check("right wheel rate", abs((v + w * half) / r), lim.wheel_rate_radps)
    check("wheel rate", max(abs(out.left_radps), abs(out.right_radps)), lim.wheel_rate_radps)
    if lim.sideways_accel_mps2 is not None:
        check("sideways", abs(v * w), lim.sideways_accel_mps2)
    accel, decel, jerk = lim.accel_mps2, lim.decel_mps2, lim.jerk_mps3
    turn_accel, turn_jerk = lim.turn_accel_radps2, lim.turn_jerk_radps3
    if out.stopping is StopKind.FAST:
        # the fast stop: stop_decel and stop_jerk on the speed axis, the turn axis scaled alike (keeps the path);
        # a speed still growing when the stop begins only loses acceleration, within the normal accel limit
        decel, jerk = lim.stop_decel_mps2, lim.stop_jerk_mps3
        turn_accel *= lim.stop_decel_mps2 / lim.decel_mps2
        turn_jerk *= lim.stop_jerk_mps3 / lim.jerk_mps3
    # accel while |v| grows (v and a of one sign), decel while it shrinks
    check("decel" if v * a < 0 else "accel", abs(a), decel if v * a < 0 else accel)
    check("turn accel", abs(alpha), turn_accel)
    check("jerk", abs(out.jerk_mps3), jerk)
    check("turn jerk", abs(out.turn_jerk_radps3), turn_jerk)
    if lim.wheel_accel_radps2 is not None:
        check("left wheel accel", abs((a - alpha * half) / r), lim.wheel_accel_radps2)
        check("right wheel accel", abs((a + alpha * half) / r), lim.wheel_accel_radps2)
    return broken


def log_uniform(low: float, high: float) -> st.SearchStrategy[float]:
    return st.floats(math.log(low), math.log(high)).map(math.exp)


@st.composite
def robots(draw: st.DrawFn, wheel_accel_binds: bool | None = None, sideways_binds: bool | None = None,
           jerk_time_s: tuple[float, float] = (0.025, 1.0)) -> Robot:
    """Random valid profiles. Where a limit is asked to bind (None: maybe), it is drawn so that it does."""
    r = draw(st.floats(0.03, 0.3))
    track = draw(st.floats(0.2, 1.0))
    wheel_rate = draw(st.floats(5.0, 60.0))
    rim = wheel_rate * r
    speed = rim * draw(st.floats(0.2, 1.0))
    reverse = rim * draw(st.floats(0.1, 1.0))
    turn = 2 * rim / track * draw(st.floats(0.1, 1.0))
    if wheel_accel_binds is None:
        wheel_accel_binds = draw(st.integers(0, 3)) > 0
    wheel_accel = None
    if wheel_accel_binds:
        # each axis alone may use most of the wheels' acceleration budget, both together far more than all of it
        wheel_accel = draw(st.floats(5.0, 200.0))
        rim_accel = wheel_accel * r
        accel, decel = rim_accel * draw(st.floats(0.8, 1.0)), rim_accel * draw(st.floats(0.8, 1.0))
        turn_accel = 2 * rim_accel / track * draw(st.floats(0.8, 1.0))
    else:
        accel, decel, turn_accel = draw(st.floats(0.2, 5.0)), draw(st.floats(0.2, 8.0)), draw(st.floats(0.3, 10.0))
    stop_decel = max(decel, draw(st.floats(0.5, 10.0)))
    if wheel_accel is not None:
        stop_decel = min(stop_decel, wheel_accel * r)
    if sideways_binds is None:
        sideways_binds = draw(st.integers(0, 3)) > 0
    sideways = speed * turn * draw(log_uniform(0.005, 0.6)) if sideways_binds else None
    # jerk as the time it takes to build up the full acceleration
    jerk = max(accel, decel) / draw(st.floats(*jerk_time_s))
    limits = Limits(
        speed_mps=speed, reverse_speed_mps=reverse, turn_rate_radps=turn,
        accel_mps2=accel, decel_mps2=decel, jerk_mps3=jerk,
        turn_accel_radps2=turn_accel, turn_jerk_radps3=turn_accel / draw(st.floats(*jerk_time_s)),
        sideways_accel_mps2=sideways, wheel_rate_radps=wheel_rate, wheel_accel_radps2=wheel_accel,
        stop_decel_mps2=stop_decel, stop_jerk_mps3=jerk * draw(st.floats(1.0, 6.0)),
    )
    return Robot(r, track, limits)


def _arrival_allowance_s(robot: Robot) -> float:
    """Generous: a full reversal on each axis, one after the other, several times (a detour and its way back),
    slowed by the share of the wheels' acceleration budget an axis may be left with."""
    lim = robot.limits
    speed = (lim.speed_mps + lim.reverse_speed_mps) * (1 / lim.accel_mps2 + 1 / lim.decel_mps2) + 4 * (
        lim.accel_mps2 + lim.decel_mps2) / lim.jerk_mps3
    turn = 4 * lim.turn_rate_radps / lim.turn_accel_radps2 + 4 * lim.turn_accel_radps2 / lim.turn_jerk_radps3
    share = 1.0
    if lim.wheel_accel_radps2 is not None:
        both = max(lim.accel_mps2, lim.decel_mps2) + lim.turn_accel_radps2 * robot.track / 2
        share = min(1.0, lim.wheel_accel_radps2 * robot.r / both)
    return 4 * (speed + turn) / share + 2.0


def drive(robot: Robot, mode: Mode, rate_hz: float, sequence: list[Request], stops: dict[int, StopKind],
          use: dict[str, float], jitter: list[float]) -> tuple[list[str], Shaped, tuple[float, float]]:
    """Run a trace checking every sample (a stop that has come to rest is followed by a re-arm), then hold the
    last request until the output has settled. Time steps are the period times the jitter factors in turn.
    Returns what broke, the last output and the enveloped target."""
    lim = robot.limits
    shaper = Shaper(Geometry(robot.r, robot.track), lim, mode)
    dt = 1.0 / rate_hz
    broken: list[str] = []
    cycle = 0
    out = None
    v = w = 0.0

    def take(out: Shaped) -> None:
        if not out.immediate_zero:
            broken.extend(f"t={cycle * dt:.4f}: {text}" for text in broken_limits(robot, out, use))

    for v_share, w_share, hold_s in sequence:
        if v_share is not None:
            v = v_share * (lim.speed_mps if v_share >= 0 else lim.reverse_speed_mps)
        if w_share is not None:
            w = w_share * lim.turn_rate_radps
        for _ in range(max(1, round(hold_s * rate_hz))):
            if cycle in stops:
                shaper.stop(stops[cycle])
            out = shaper.step(dt * jitter[cycle % len(jitter)], v, w)
            cycle += 1
            take(out)
            if out.stopping is not None and out.settled:
                shaper.reset()
    if shaper.stopping is not None:
        shaper.reset()
    for _ in range(round(_arrival_allowance_s(robot) / dt)):
        out = shaper.step(dt * jitter[cycle % len(jitter)], v, w)
        cycle += 1
        take(out)
        if out.settled:
            break
    assert out is not None
    return broken, out, enveloped(robot, v, w)


def assert_invariant(robot: Robot, mode: Mode, rate_hz: float, sequence: list[Request],
                     stops: dict[int, StopKind] | None = None, jitter: list[float] | None = None) -> None:
    use: dict[str, float] = {}
    broken, last, goal = drive(robot, mode, rate_hz, sequence, stops or {}, use, jitter or [1.0])
    for label, names in (("sideways", ["sideways"]), ("wheel rate", ["left wheel rate", "right wheel rate"]),
                         ("wheel accel", ["left wheel accel", "right wheel accel"])):
        target(max(use.get(name, 0.0) for name in names), label=label)
    # one assertion per class of limit, so that hypothesis reports (and shrinks) each class that breaks
    rates = [text for text in broken if text.split(": ", 1)[1].startswith(RATE_LIMITS)]
    assert not rates, rates[:5]
    assert not broken, broken[:5]
    assert last.settled, "did not arrive within the allowance"
    assert (last.a_mps2, last.alpha_radps2) == (0.0, 0.0)
    assert math.isclose(last.v_mps, goal[0], rel_tol=1e-9, abs_tol=1e-12), (last.v_mps, goal)
    assert math.isclose(last.omega_radps, goal[1], rel_tol=1e-9, abs_tol=1e-12), (last.omega_radps, goal)


shares = st.one_of(st.none(), st.floats(-3.0, 3.0), st.sampled_from([-1.0, 0.0, 1.0]))  # up to 3x: far outside


@st.composite
def traces(draw: st.DrawFn, robot: Robot) -> list[Request]:
    """Any requests, held for one cycle or for a part of the time the robot takes to reach full speed."""
    lim = robot.limits
    ramp_s = max(lim.speed_mps / lim.accel_mps2, lim.turn_rate_radps / lim.turn_accel_radps2)
    hold = st.one_of(st.just(0.0), st.floats(0.02, 1.5).map(lambda share: share * ramp_s))
    return draw(st.lists(st.tuples(shares, shares, hold), min_size=1, max_size=10))


# examples per search; DIFFDECK_INVARIANT_EXAMPLES=5000 for a deeper run by hand
EXAMPLES = int(os.environ.get("DIFFDECK_INVARIANT_EXAMPLES", "300"))
SETTINGS = settings(max_examples=EXAMPLES, deadline=None, suppress_health_check=[HealthCheck.too_slow])


@SETTINGS
@given(st.data(), st.sampled_from(list(Mode)), st.sampled_from(RATES_HZ),
       st.dictionaries(st.integers(0, 300), st.sampled_from([StopKind.CONTROLLED, StopKind.FAST]), max_size=2),
       st.lists(st.floats(0.5, 1.5), min_size=1, max_size=8))
def test_any_trace_keeps_every_limit_and_arrives(
    data: st.DataObject, mode: Mode, rate_hz: float, stops: dict[int, StopKind], jitter: list[float]
) -> None:
    robot = data.draw(robots())
    assert_invariant(robot, mode, rate_hz, data.draw(traces(robot)), stops, jitter)


@SETTINGS
@given(robots(wheel_accel_binds=True, sideways_binds=False), st.sampled_from(list(Mode)), st.sampled_from(RATES_HZ),
       st.booleans(), st.floats(0.2, 0.8), st.floats(0.05, 0.8), st.floats(0.1, 1.0), st.booleans(), st.booleans())
def test_one_axis_starting_while_the_other_accelerates_keeps_the_wheel_acceleration(
    robot: Robot, mode: Mode, rate_hz: float, turn_first: bool, first: float, second: float, into_ramp: float,
    first_back: bool, second_back: bool,
) -> None:
    # The first axis is asked for a change and, part way into its ramp, the other one too.
    lim = robot.limits
    first, second = -first if first_back else first, -second if second_back else second
    if turn_first:
        ramp_s = abs(first) * lim.turn_rate_radps / lim.turn_accel_radps2
        sequence: list[Request] = [(0.0, first, into_ramp * ramp_s), (second, None, 0.0)]
    else:
        top = lim.speed_mps if first > 0 else lim.reverse_speed_mps
        ramp_s = abs(first) * top / lim.accel_mps2
        sequence = [(first, 0.0, into_ramp * ramp_s), (None, second, 0.0)]
    assert_invariant(robot, mode, rate_hz, sequence)


@settings(SETTINGS, max_examples=EXAMPLES * 4 // 3)
@given(robots(wheel_accel_binds=False, sideways_binds=True, jerk_time_s=(0.3, 1.5)), st.sampled_from(RATES_HZ),
       st.tuples(st.floats(0.0, 0.2), st.floats(-0.3, 0.3)), st.floats(-1.0, 1.0), st.floats(-0.1, 0.1),
       st.floats(-1.0, 1.0), st.tuples(st.floats(0.1, 2.0), st.floats(0.1, 2.0)))
def test_replans_while_leaving_an_arc_keep_the_rate_limits(
    robot: Robot, rate_hz: float, arc: tuple[float, float], straight: float, turn_left: float, back: float,
    holds: tuple[float, float],
) -> None:
    # A gentle arc, then fast straight on (with what is left of the turn), then fast the other way; each request
    # comes part way into the previous ramp (holds are in units of the time to build up full acceleration).
    jerk_time_s = robot.limits.accel_mps2 / robot.limits.jerk_mps3
    sequence: list[Request] = [
        (*arc, holds[0] * jerk_time_s), (straight, turn_left, holds[1] * jerk_time_s), (back, 0.0, 0.0),
    ]
    assert_invariant(robot, Mode.SYNCED, rate_hz, sequence)
