"""Both axes together: sanitize -> envelope (curvature kept) -> jerk-limited ramps -> wheel rates; stops.

In the default synchronized mode the speed and turn-rate ramps arrive together. Where the starting state allows
(from rest, or with accelerations proportional to the step) the two axes follow ONE scalar ramp along the straight
line from the current (v, omega) to the target, so a robot asked for an arc from rest starts on that arc. The
scalar ramp's limits are the tightest of both axes and of the wheels, which keeps it time-optimal under all of them.
Otherwise both axes are planned time-optimally and the faster one is stretched to arrive with the slower.

A re-target from a moving state can bend the way between two points that both lie inside the envelope out of it
(the wheel-rate and sideways limits are not boxes), and the axis still accelerating from the last plan can push the
wheels past their acceleration limit. So a plan replaces the one in force only after an exact check of its whole
way; if the way to the target leaves the envelope, the shaper goes to the largest same-curvature part of the target
whose way stays inside, or keeps the plan in force and tries again next cycle; from rest it goes on in straight
lines, which always stay inside (see `Shaper` and `_corner`).
"""

from __future__ import annotations

import enum
import itertools
import math
from dataclasses import dataclass

from shaping.envelope import Bound, Envelope, Limits
from shaping.geometry import Geometry
from shaping.ramp import AxisLimits, Ramp, plan_ramp, standstill, stretch_ramp

_SLACK = 1.0 + 1e-9
"""Rounding allowance when a plan's way is checked against the envelope."""

_NEAR_SHARE = 63.0 / 64.0
"""The part of a target tried first when the way to all of it leaves the envelope."""

_SHRINK_STEPS = 5
"""Then bisection steps below it for the largest part whose way stays inside (1/32 resolution)."""

_AT_LIMIT = 0.999
"""Share of a budget from which a limit counts as binding (what the operator sees as 'which limit binds')."""


class Mode(enum.Enum):
    SYNCED = "synced"
    INDEPENDENT = "independent"


class StopKind(enum.Enum):
    CONTROLLED = "controlled"  # normal limits, to rest
    FAST = "fast"  # stop_decel / stop_jerk, to rest
    IMMEDIATE = "immediate"  # zero at once, for a drive that removes power


@dataclass(frozen=True, slots=True)
class Shaped:
    """One shaping cycle's output; see the field comments in the project's contract."""

    v_req_mps: float
    omega_req_radps: float
    v_target_mps: float
    omega_target_radps: float
    v_mps: float
    omega_radps: float
    a_mps2: float
    alpha_radps2: float
    jerk_mps3: float
    turn_jerk_radps3: float
    left_radps: float
    right_radps: float
    bound: Bound | None
    accel_use: float
    jerk_use: float
    rejected: bool
    stopping: StopKind | None
    immediate_zero: bool
    settled: bool


def speed_limits(limits: Limits, stop: StopKind | None = None) -> AxisLimits:
    """Speed-axis ramp limits, normal or for a fast stop."""
    if stop is StopKind.FAST:
        return AxisLimits(limits.stop_decel_mps2, limits.stop_decel_mps2, limits.stop_jerk_mps3)
    return AxisLimits(limits.accel_mps2, limits.decel_mps2, limits.jerk_mps3)


def turn_limits(limits: Limits, stop: StopKind | None = None) -> AxisLimits:
    """Turn-axis ramp limits. A fast stop scales them like the speed axis's, so the stop keeps the path."""
    accel, jerk = limits.turn_accel_radps2, limits.turn_jerk_radps3
    if stop is StopKind.FAST:
        accel *= limits.stop_decel_mps2 / limits.decel_mps2
        jerk *= limits.stop_jerk_mps3 / limits.jerk_mps3
    return AxisLimits(accel, accel, jerk)


def _speed_bound_along(v0: float, v1: float, limits: AxisLimits) -> float:
    """The acceleration bound that holds on the whole way from v0 to v1 (both bounds where it crosses zero)."""
    if v0 * v1 < 0.0:
        return min(limits.accel, limits.decel)
    return limits.accel if abs(v1) >= abs(v0) else limits.decel


def _peak_product(v: tuple[float, float, float], w: tuple[float, float, float], piece: float) -> float:
    """max |v(tau) * omega(tau)| over [0, piece] for two quadratics given by their coefficients (c0, c1, c2).

    The product is a quartic; its extremes are at the ends or where its derivative (a cubic) vanishes. Only
    reached when the cheaper bound max|v| * max|omega| over the piece says the sideways limit may bind.
    """
    (v0, v1, v2), (w0, w1, w2) = v, w
    p0, p1, p2, p3, p4 = v0 * w0, v0 * w1 + v1 * w0, v0 * w2 + v1 * w1 + v2 * w0, v1 * w2 + v2 * w1, v2 * w2
    peak = 0.0
    for tau in (0.0, piece, *real_cubic_roots(4.0 * p4, 3.0 * p3, 2.0 * p2, p1)):
        if 0.0 <= tau <= piece:
            value = (((p4 * tau + p3) * tau + p2) * tau + p1) * tau + p0
            peak = max(peak, value if value >= 0.0 else -value)
    return peak


def real_cubic_roots(c3: float, c2: float, c1: float, c0: float) -> list[float]:
    """Real roots of c3 x^3 + c2 x^2 + c1 x + c0, in closed form (Cardano; trigonometric form for three roots).

    Lower degrees are handled when the leading coefficients vanish next to the others.
    """
    scale = max(abs(c3), abs(c2), abs(c1), abs(c0))
    if scale == 0.0:
        return []
    if abs(c3) <= 1e-12 * scale:
        if abs(c2) <= 1e-12 * scale:
            return [] if c1 == 0.0 else [-c0 / c1]
        disc = c1 * c1 - 4.0 * c2 * c0
        if disc < 0.0:
            return []
        root = math.sqrt(disc)
        return [(-c1 - root) / (2.0 * c2), (-c1 + root) / (2.0 * c2)]
    a, b, c = c2 / c3, c1 / c3, c0 / c3
    shift = a / 3.0
    p = b - a * a / 3.0
    q = 2.0 * a**3 / 27.0 - a * b / 3.0 + c
    disc = (q / 2.0) ** 2 + (p / 3.0) ** 3
    if disc > 0.0:
        # one real root; the larger cube root first, the other from their product -p/3 (no cancellation)
        big = -math.copysign(math.cbrt(abs(q) / 2.0 + math.sqrt(disc)), q)
        return [big - p / (3.0 * big) - shift]
    if p == 0.0:
        return [-shift]
    radius = 2.0 * math.sqrt(-p / 3.0)
    angle = math.acos(max(-1.0, min(1.0, 3.0 * q / (p * radius)))) / 3.0
    return [radius * math.cos(angle - 2.0 * math.pi * k / 3.0) - shift for k in range(3)]


def _common_rate(
    speed_state: tuple[float, float], turn_state: tuple[float, float], target: tuple[float, float],
    speed: AxisLimits, turn: AxisLimits,
) -> float | None:
    """d(sigma)/dt if both accelerations already point along the step to the target, else None.

    Taken from the axis with the larger step relative to its acceleration limit; the other axis's acceleration
    must then match sigma' times its step to within 1e-9 of its own limit.
    """
    (v, a), (w, alpha) = speed_state, turn_state
    dv, dw = target[0] - v, target[1] - w
    speed_accel = max(speed.accel, speed.decel)
    if abs(dv) / speed_accel >= abs(dw) / turn.accel:
        if dv == 0.0:
            return 0.0 if a == 0.0 and alpha == 0.0 else None
        rate = a / dv
        return rate if abs(rate * dw - alpha) <= 1e-9 * turn.accel else None
    rate = alpha / dw
    return rate if abs(rate * dv - a) <= 1e-9 * speed_accel else None


# (v, a, j, omega, alpha, turn_jerk)
_Sample = tuple[float, float, float, float, float, float]


class _AxesMotion:
    """Two separately planned ramps (time-synchronized or independent)."""

    __slots__ = ("speed", "turn", "duration", "end", "provisional")

    def __init__(self, speed: Ramp, turn: Ramp, provisional: bool = False) -> None:
        self.speed = speed
        self.turn = turn
        self.duration = max(speed.duration, turn.duration)
        self.end = (speed.target, turn.target)
        # planned with what one axis's present acceleration leaves the other: worth planning again next cycle
        self.provisional = provisional

    def box(self) -> tuple[tuple[float, float], tuple[float, float]]:
        """The ranges of v and omega that the way stays in."""
        return self.speed.extent(), self.turn.extent()

    def joints(self) -> list[float]:
        """Times at which either axis changes its jerk, from 0 to the end."""
        return sorted({0.0, *self.speed.joints(), *self.turn.joints()})

    def peak_accels(self) -> tuple[float, float]:
        """The largest |a| and |alpha| on the way (not necessarily at the same moment)."""
        return self.speed.peak_accel, self.turn.peak_accel

    def sample(self, t: float) -> _Sample:
        return self.speed.sample(t) + self.turn.sample(t)


class _LineMotion:
    """Both axes on one scalar ramp sigma: 0 -> 1 along the straight line from the start to the target."""

    __slots__ = ("sigma", "start", "step", "end", "duration")

    provisional = False

    def __init__(self, sigma: Ramp, start: tuple[float, float], end: tuple[float, float]) -> None:
        self.sigma = sigma
        self.start = start
        self.end = end
        self.step = (end[0] - start[0], end[1] - start[1])
        self.duration = sigma.duration

    def sample(self, t: float) -> _Sample:
        if t >= self.duration:
            return self.end[0], 0.0, 0.0, self.end[1], 0.0, 0.0
        sigma, rate, change = self.sigma.sample(t)
        dv, dw = self.step
        return self.start[0] + dv * sigma, dv * rate, dv * change, self.start[1] + dw * sigma, dw * rate, dw * change

    def box(self) -> tuple[tuple[float, float], tuple[float, float]]:
        low, high = self.sigma.extent()
        (v, w), (dv, dw) = self.start, self.step
        v_ends, w_ends = (v + dv * low, v + dv * high), (w + dw * low, w + dw * high)
        return (min(v_ends), max(v_ends)), (min(w_ends), max(w_ends))

    def joints(self) -> list[float]:
        return sorted({0.0, *self.sigma.joints()})

    def peak_accels(self) -> tuple[float, float]:
        """The largest |a| and |alpha| on the way; on a line they peak together."""
        peak = self.sigma.peak_accel
        return abs(self.step[0]) * peak, abs(self.step[1]) * peak


_REST = _AxesMotion(standstill(0.0), standstill(0.0))


def _toward_zero(start: float, end: float) -> float:
    """Of two values of one rate, the one nearer zero if they have one sign, else zero."""
    if start * end <= 0.0:
        return 0.0
    return start if abs(start) <= abs(end) else end


def _corner(start: tuple[float, float], target: tuple[float, float]) -> tuple[float, float]:
    """A point from which, and to which, straight ways from rest to `target` stay inside the envelope.

    Every limit of the envelope only grows with |v| and |omega| on each side of zero (speeds, turn rate, wheel
    rates, |v x omega|). On the straight way from `start` to the corner neither |v| nor |omega| grows and no sign
    changes, so each point is dominated by `start`; from the corner to `target` they only grow towards the target's,
    so each point is dominated by `target`. Both ends being inside, so is the whole way. (The straight way from
    start to target itself can leave: |v x omega| <= limit is not a convex set.)
    """
    return _toward_zero(start[0], target[0]), _toward_zero(start[1], target[1])


class Shaper:
    """Stateful shaping of a stream of (v, omega) requests; the caller supplies every time step.

    Invariant: the plan in force keeps every limit along its whole way. A new plan replaces it only after its whole
    way has been checked (`_way_breaks`); when no candidate passes, the plan in force goes on and the re-plan is
    tried again next cycle. Progress: every plan ends at rest in acceleration, and from rest the straight line to
    the target, or the way through the corner point (`_corner`), always passes, so the output reaches the enveloped
    target of the last request in finite time.
    """

    def __init__(self, geometry: Geometry, limits: Limits, mode: Mode = Mode.SYNCED) -> None:
        self.envelope = Envelope(geometry, limits)
        self.mode = mode
        self._axis_limits = {
            kind: (speed_limits(limits, kind), turn_limits(limits, kind)) for kind in (None, *StopKind)
        }
        self.reset()

    def reset(self) -> None:
        """Back to rest with no stop pending: every ramp starts again from zero."""
        self._motion: _AxesMotion | _LineMotion = _REST
        self._t = 0.0
        self._target = (0.0, 0.0)  # the enveloped request in force
        self._aim = (0.0, 0.0)  # where the plan in force ends: the target, or a point on the way to it
        self._request = (0.0, 0.0)
        self._stop: StopKind | None = None
        self._bound: Bound | None = None  # the envelope limit that cut the request, if any
        self._held_by: Bound | None = None  # the limit that keeps the plan in force from heading to the target
        self._retry = False  # plan again next cycle: no candidate passed, or the plan in force is provisional

    @property
    def stopping(self) -> StopKind | None:
        return self._stop

    def stop(self, kind: StopKind) -> None:
        """Bring the robot to rest; requests are ignored until reset(). A stop never softens a harsher one."""
        order = (None, StopKind.CONTROLLED, StopKind.FAST, StopKind.IMMEDIATE)
        if order.index(kind) <= order.index(self._stop):
            return
        self._stop = kind
        self._target = (0.0, 0.0)
        if kind is StopKind.IMMEDIATE:
            self._motion, self._t, self._aim, self._held_by, self._retry = _REST, 0.0, (0.0, 0.0), None, False
        else:
            self._replan()

    def step(self, dt_s: float, v_req_mps: float, omega_req_radps: float) -> Shaped:
        """Take the request now, advance by dt_s, and return the shaped command at the end of the step."""
        if not (math.isfinite(dt_s) and dt_s >= 0.0):
            raise ValueError(f"time step must be finite and >= 0, got {dt_s!r}")
        rejected = not (math.isfinite(v_req_mps) and math.isfinite(omega_req_radps))
        if not rejected:
            self._request = (v_req_mps, omega_req_radps)
        changed = False
        if self._stop is None:
            clamped = self.envelope.clamp(*self._request)
            self._bound = clamped.bound
            target = (clamped.v_mps, clamped.omega_radps)
            changed, self._target = target != self._target, target
        # a new target, a plan held back (or provisional) last cycle, or the end of a detour: plan again
        if changed or self._retry or (self._aim != self._target and self._ended()):
            self._replan()
        self._t += dt_s
        return self._output(rejected)

    # -- planning -------------------------------------------------------------------------------------------------

    def _ended(self) -> bool:
        """Whether the plan in force has arrived (at its aim, with zero acceleration)."""
        return self._t >= self._motion.duration

    def _replan(self) -> None:
        """Replace the plan in force by the first candidate whose whole way keeps every limit; else keep it."""
        target, stop = self._target, self._stop
        v, a, _, w, alpha, _ = self._motion.sample(self._t)
        start = ((v, a), (w, alpha))
        direct = self._plan(*start, target, stop)
        broken = self._way_breaks(direct)
        if broken is None:
            self._accept(direct, None)
            return
        # The way to the whole target leaves the envelope: the largest same-curvature part of it whose way stays
        # inside (most ways leave by a hair: 63/64 first, then bisection), from where the rest is a straight line.
        # A stop's target is the origin, which has no smaller part.
        detour: _AxesMotion | _LineMotion | None = None
        if target != (0.0, 0.0):
            detour = self._part_way(start, target, _NEAR_SHARE)
            inside, outside = 0.0, _NEAR_SHARE
            for _ in range(0 if detour else _SHRINK_STEPS):
                middle = 0.5 * (inside + outside)
                candidate = self._part_way(start, target, middle)
                if candidate is None:
                    outside = middle
                else:
                    inside, detour = middle, candidate
        if detour is None and a == 0.0 and alpha == 0.0:
            # from rest, through the corner point the way always stays inside (see _corner)
            detour = self._part_way(start, _corner((v, w), target), 1.0)
        if detour is not None:
            self._accept(detour, broken)
        else:
            # the plan in force goes on (it keeps every limit); try again next cycle
            self._held_by, self._retry = broken, True

    def _part_way(
        self, start: tuple[tuple[float, float], tuple[float, float]], target: tuple[float, float], share: float,
    ) -> _AxesMotion | _LineMotion | None:
        """The plan to share x target, if its way keeps every limit."""
        motion = self._plan(*start, (target[0] * share, target[1] * share), self._stop)
        return None if self._way_breaks(motion) else motion

    def _accept(self, motion: _AxesMotion | _LineMotion, held_by: Bound | None) -> None:
        self._motion, self._t, self._aim, self._retry = motion, 0.0, motion.end, motion.provisional
        if motion.provisional:
            self._held_by = Bound.WHEEL_ACCEL
        else:
            self._held_by = held_by if motion.end != self._target else None

    def _plan(
        self, speed_state: tuple[float, float], turn_state: tuple[float, float], target: tuple[float, float],
        stop: StopKind | None,
    ) -> _AxesMotion | _LineMotion:
        speed, turn = self._axis_limits[stop]
        if self.mode is Mode.SYNCED:
            sigma_rate = _common_rate(speed_state, turn_state, target, speed, turn)
            if sigma_rate is not None:
                return self._plan_line(speed_state, turn_state, target, sigma_rate, speed, turn)
        return self._plan_axes(speed_state, turn_state, target, speed, turn)

    def _way_breaks(self, motion: _AxesMotion | _LineMotion) -> Bound | None:
        """The first limit the plan's way breaks, or None when it keeps them all.

        Exact: within a constant-jerk piece every rate is a quadratic in time, so speed, turn rate and each wheel's
        rate peak at a piece's end or at their vertex; the sideways product v * omega is a quartic whose extremes
        are found in closed form; the wheel accelerations are linear within a piece, so they peak at its ends.
        """
        limits, geometry = self.envelope.limits, self.envelope.geometry
        half_track = 0.5 * geometry.track_width_m
        rim_speed = limits.wheel_rate_radps * geometry.wheel_radius_m * _SLACK
        speed, reverse = limits.speed_mps * _SLACK, limits.reverse_speed_mps * _SLACK
        turn = limits.turn_rate_radps * _SLACK
        sideways = math.inf if limits.sideways_accel_mps2 is None else limits.sideways_accel_mps2 * _SLACK
        rim_accel = math.inf if limits.wheel_accel_radps2 is None else (
            limits.wheel_accel_radps2 * geometry.wheel_radius_m * _SLACK)
        # Cheap and sufficient first: the whole box the way stays in is inside (each limit at the box's worst
        # corner), and so are the largest accelerations of both axes at once.
        (v_low, v_high), (w_low, w_high) = motion.box()
        fastest, sharpest = max(-v_low, v_high), max(-w_low, w_high)
        peak_a, peak_alpha = motion.peak_accels()
        accels_inside = peak_a + peak_alpha * half_track <= rim_accel
        rates_inside = (
            v_high <= speed
            and -v_low <= reverse
            and sharpest <= turn
            and fastest + sharpest * half_track <= rim_speed
            and fastest * sharpest <= sideways
        )
        if rates_inside and accels_inside:
            return None
        joints = motion.joints()
        for t0, t1 in itertools.pairwise(joints):
            piece = t1 - t0
            v, a, jerk, w, alpha, turn_jerk = motion.sample(t0)
            if not accels_inside:
                a_end, alpha_end = a + jerk * piece, alpha + turn_jerk * piece
                if max(abs(a) + abs(alpha) * half_track, abs(a_end) + abs(alpha_end) * half_track) > rim_accel:
                    return Bound.WHEEL_ACCEL
            if rates_inside:
                continue
            # vertices of v, omega and both wheels' rims (v -+ omega W/2), where they lie inside the piece
            times = [0.0, piece]
            for rate, change in ((a, jerk), (alpha, turn_jerk), (a - alpha * half_track, jerk - turn_jerk * half_track),
                                 (a + alpha * half_track, jerk + turn_jerk * half_track)):
                if change != 0.0 and 0.0 < -rate / change < piece:
                    times.append(-rate / change)
            fastest = sharpest = 0.0  # comparisons, not abs() and max() calls: this is the re-plan's hot loop
            for tau in times:
                v_at = v + a * tau + 0.5 * jerk * tau * tau
                w_at = w + alpha * tau + 0.5 * turn_jerk * tau * tau
                if v_at > speed:
                    return Bound.SPEED
                if -v_at > reverse:
                    return Bound.REVERSE_SPEED
                v_size = v_at if v_at >= 0.0 else -v_at
                w_size = w_at if w_at >= 0.0 else -w_at
                if w_size > turn:
                    return Bound.TURN_RATE
                if v_size + w_size * half_track > rim_speed:
                    return Bound.WHEEL_RATE
                if v_size > fastest:
                    fastest = v_size
                if w_size > sharpest:
                    sharpest = w_size
            if fastest * sharpest > sideways:
                if _peak_product((v, a, 0.5 * jerk), (w, alpha, 0.5 * turn_jerk), piece) > sideways:
                    return Bound.SIDEWAYS_ACCEL
        return None

    def _plan_line(
        self, speed_state: tuple[float, float], turn_state: tuple[float, float], target: tuple[float, float],
        sigma_rate: float, speed: AxisLimits, turn: AxisLimits,
    ) -> _LineMotion:
        (v, _), (w, _) = speed_state, turn_state
        dv, dw = target[0] - v, target[1] - w
        accel_bounds, jerk_bounds = [], []
        if dv != 0.0:
            accel_bounds.append(_speed_bound_along(v, target[0], speed) / abs(dv))
            jerk_bounds.append(speed.jerk / abs(dv))
        if dw != 0.0:
            accel_bounds.append(turn.accel / abs(dw))
            jerk_bounds.append(turn.jerk / abs(dw))
        if not accel_bounds:
            return _LineMotion(standstill(1.0), (v, w), target)
        wheel_accel = self.envelope.limits.wheel_accel_radps2
        if wheel_accel is not None:
            geometry = self.envelope.geometry
            wheel_step = max(abs(x) for x in geometry.to_wheels(dv, dw))
            if wheel_step > 0.0:
                accel_bounds.append(wheel_accel / wheel_step)
        sigma_accel, sigma_jerk = min(accel_bounds), min(jerk_bounds)
        if not all(map(math.isfinite, (sigma_accel, sigma_jerk, sigma_rate))):
            # a step so small (subnormal) that its limits overflow: it is already done
            return _LineMotion(standstill(1.0), (v, w), target)
        sigma = plan_ramp(0.0, sigma_rate, 1.0, AxisLimits(sigma_accel, sigma_accel, sigma_jerk))
        if dv != 0.0 and speed.accel != speed.decel:
            low, high = sigma.extent()
            if low < 0.0 or high > 1.0:
                # The way runs past an end of the step and back (the start's acceleration carries it), so the speed
                # both grows and shrinks on it: the smaller of accel and decel holds on all of it.
                sigma_accel = min(sigma_accel, min(speed.accel, speed.decel) / abs(dv))
                sigma = plan_ramp(0.0, sigma_rate, 1.0, AxisLimits(sigma_accel, sigma_accel, sigma_jerk))
        return _LineMotion(sigma, (v, w), target)

    def _plan_axes(
        self, speed_state: tuple[float, float], turn_state: tuple[float, float], target: tuple[float, float],
        speed: AxisLimits, turn: AxisLimits,
    ) -> _AxesMotion:
        speed, turn, provisional = self._share_wheel_accel(speed_state, turn_state, target, speed, turn)
        # An axis whose share of the wheels' budget is nothing for now holds still (it is not accelerating then:
        # what it leaves the other axis is at least its own present acceleration).
        speed_ramp = (plan_ramp(*speed_state, target[0], speed) if speed.accel > 0.0 or speed_state[1] != 0.0
                      else standstill(speed_state[0]))
        turn_ramp = (plan_ramp(*turn_state, target[1], turn) if turn.accel > 0.0 or turn_state[1] != 0.0
                     else standstill(turn_state[0]))
        if self.mode is Mode.SYNCED:
            duration = max(speed_ramp.duration, turn_ramp.duration)
            speed_ramp = stretch_ramp(speed_ramp, speed, duration)
            turn_ramp = stretch_ramp(turn_ramp, turn, duration)
        return _AxesMotion(speed_ramp, turn_ramp, provisional)

    def _share_wheel_accel(
        self, speed_state: tuple[float, float], turn_state: tuple[float, float], target: tuple[float, float],
        speed: AxisLimits, turn: AxisLimits,
    ) -> tuple[AxisLimits, AxisLimits, bool]:
        """Lower the body limits just enough that |a| + |alpha| W/2 <= wheel_accel * r all along the way.

        Each axis gets a share of the wheels' acceleration budget. An axis already accelerating harder than its
        share can only come down at its jerk limit, so meanwhile the other axis may use only what is left now; such
        a plan is provisional (True): planned again each cycle, the share left grows as the busy axis comes down.
        A ramp's |acceleration| never exceeds the larger of its start and its bound, so the sum stays in budget.
        """
        wheel_accel = self.envelope.limits.wheel_accel_radps2
        if wheel_accel is None:
            return speed, turn, False
        geometry = self.envelope.geometry
        rim_accel = wheel_accel * geometry.wheel_radius_m
        half_track = 0.5 * geometry.track_width_m
        speed_moves = speed_state != (target[0], 0.0)
        turn_moves = turn_state != (target[1], 0.0)
        speed_need = max(speed.accel, speed.decel) if speed_moves else 0.0
        turn_need = turn.accel * half_track if turn_moves else 0.0
        if speed_need + turn_need <= rim_accel:
            return speed, turn, False
        factor = rim_accel / (speed_need + turn_need)
        speed_now, turn_now = abs(speed_state[1]), abs(turn_state[1]) * half_track
        speed_cap, turn_cap = factor * speed_need, factor * turn_need
        provisional = True
        if turn_now > turn_cap:
            speed_cap = max(0.0, rim_accel - turn_now)
        elif speed_now > speed_cap:
            turn_cap = max(0.0, rim_accel - speed_now)
        else:
            provisional = False
        return (AxisLimits(min(speed.accel, speed_cap), min(speed.decel, speed_cap), speed.jerk),
                AxisLimits(min(turn.accel, turn_cap / half_track), min(turn.decel, turn_cap / half_track), turn.jerk),
                provisional)

    # -- output ---------------------------------------------------------------------------------------------------

    def _edge(self, v: float, w: float, left: float, right: float) -> Bound | None:
        """The envelope limit (v, omega) is on, if any (within the share that counts as binding)."""
        limits = self.envelope.limits  # comparisons only: this runs every cycle
        if v >= _AT_LIMIT * limits.speed_mps:
            return Bound.SPEED
        if -v >= _AT_LIMIT * limits.reverse_speed_mps:
            return Bound.REVERSE_SPEED
        turn = _AT_LIMIT * limits.turn_rate_radps
        if w >= turn or -w >= turn:
            return Bound.TURN_RATE
        wheel = _AT_LIMIT * limits.wheel_rate_radps
        if left >= wheel or -left >= wheel or right >= wheel or -right >= wheel:
            return Bound.WHEEL_RATE
        sideways, product = limits.sideways_accel_mps2, v * w
        if sideways is not None and (product >= _AT_LIMIT**2 * sideways or -product >= _AT_LIMIT**2 * sideways):
            return Bound.SIDEWAYS_ACCEL
        return None

    def _output(self, rejected: bool) -> Shaped:
        v, a, j, w, alpha, turn_jerk = self._motion.sample(self._t)
        limits = self.envelope.limits
        speed, turn = self._axis_limits[self._stop]
        left, right = self.envelope.geometry.to_wheels(v, w)
        accel_use = max(abs(a) / speed.bound(v, a), abs(alpha) / turn.accel)
        wheel_accel_use = 0.0
        if limits.wheel_accel_radps2 is not None:
            left_accel, right_accel = self.envelope.geometry.to_wheels(a, alpha)
            wheel_accel_use = max(abs(left_accel), abs(right_accel)) / limits.wheel_accel_radps2
        jerk_use = max(abs(j) / speed.jerk, abs(turn_jerk) / turn.jerk)
        # What binds now, first match: an edge of the envelope the output is on; the limit that keeps the plan from
        # heading straight to the target; an acceleration limit the ramps use in full; the limit that cut the
        # request; the jerk limit the ramps use in full.
        bound: Bound | None = None
        if self._stop is None:
            bound = self._edge(v, w, left, right) or self._held_by
        if bound is None and max(accel_use, wheel_accel_use) >= _AT_LIMIT:
            bound = Bound.WHEEL_ACCEL if wheel_accel_use > accel_use else Bound.ACCEL
        if bound is None and self._stop is None:
            bound = self._bound
        if bound is None and jerk_use >= _AT_LIMIT:
            bound = Bound.JERK
        return Shaped(
            v_req_mps=self._request[0],
            omega_req_radps=self._request[1],
            v_target_mps=self._target[0],
            omega_target_radps=self._target[1],
            v_mps=v,
            omega_radps=w,
            a_mps2=a,
            alpha_radps2=alpha,
            jerk_mps3=j,
            turn_jerk_radps3=turn_jerk,
            left_radps=left,
            right_radps=right,
            bound=bound,
            accel_use=min(1.0, max(accel_use, wheel_accel_use)),
            jerk_use=min(1.0, jerk_use),
            rejected=rejected,
            stopping=self._stop,
            immediate_zero=self._stop is StopKind.IMMEDIATE,
            settled=self._t >= self._motion.duration and self._aim == self._target and not self._retry,
        )
