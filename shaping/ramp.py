"""Time-optimal jerk-limited velocity ramp for one axis, planned in closed form from any (velocity, acceleration).

The plan is a short list of constant-jerk segments: jerk towards a peak acceleration, hold it, jerk back to zero
acceleration exactly at the target. This three-segment shape is the time-optimal one for reaching a target
velocity under acceleration and jerk bounds. The acceleration bound depends on the motion: `accel` while |v|
grows, `decel` while |v| shrinks; when the ramp crosses zero speed it is planned in two stages so that the
acceleration is already inside the bound of the far side when the speed passes zero.

Planning is pure and cheap; a plan is immutable and sampled with `at(t)`, so re-targeting at any moment is
"sample the old plan now, plan again from that state".
"""

from __future__ import annotations

import math
from bisect import bisect_right
from dataclasses import dataclass


@dataclass(frozen=True, slots=True)
class AxisLimits:
    """|a| <= accel while |v| grows, |a| <= decel while |v| shrinks, |jerk| <= jerk."""

    accel: float
    decel: float
    jerk: float

    def bound(self, v: float, a: float) -> float:
        """The acceleration bound that applies in state (v, a)."""
        return self.decel if v * a < 0.0 else self.accel


@dataclass(frozen=True, slots=True)
class RampState:
    v: float
    a: float
    j: float


# A piece of a plan in normalised coordinates: (duration, jerk).
_Piece = tuple[float, float]


def _ramp_dv(a_from: float, a_to: float, jerk: float) -> float:
    """Velocity gained while the acceleration moves from a_from to a_to at full jerk."""
    return abs(a_to - a_from) / jerk * 0.5 * (a_from + a_to)


def _pieces(a0: float, a_peak: float, hold: float, a_end: float, jerk: float) -> list[_Piece]:
    return [
        (abs(a_peak - a0) / jerk, math.copysign(jerk, a_peak - a0)),
        (hold, 0.0),
        (abs(a_end - a_peak) / jerk, math.copysign(jerk, a_end - a_peak)),
    ]


def _rising(dv: float, a0: float, a_end: float, a_max: float, jerk: float) -> list[_Piece]:
    """Fastest profile that gains dv while the acceleration goes a0 -> peak -> a_end, with peak <= a_max.

    Requires dv >= _ramp_dv(a0, a_end) (the 'rising' family). A start above a_max is brought down at full jerk.
    """
    peak = min(math.sqrt(max(0.0, jerk * dv + 0.5 * (a0 * a0 + a_end * a_end))), a_max)
    if peak <= 0.0:
        return []
    hold = (dv - _ramp_dv(a0, peak, jerk) - _ramp_dv(peak, a_end, jerk)) / peak
    return _pieces(a0, peak, max(0.0, hold), a_end, jerk)


def _stretched_rising(dv: float, a0: float, jerk: float, duration: float) -> list[_Piece]:
    """A rising profile to zero final acceleration that takes exactly `duration` (>= the minimum) to gain dv.

    Lowering the peak lengthens the profile monotonically. With the peak at or above max(a0, 0) the duration is
    D(p) = (p - a0)/J + (dv + a0^2/(2J))/p, a quadratic in p; below a0 (a start already accelerating hard) the
    ramp time is fixed at a0/J and the hold takes the rest.
    """
    base = dv + a0 * a0 / (2.0 * jerk)
    floor = max(a0, 0.0)
    if floor > 0.0 and duration >= base / a0:  # D(a0): even the lowest peak of the quadratic branch is too fast
        ramp_time = a0 / jerk
        spare = duration - ramp_time
        peak = (dv - a0 * a0 / (2.0 * jerk)) / spare if spare > 0.0 else 0.0
        if peak <= 0.0:
            return [(ramp_time, -jerk), (max(0.0, spare), 0.0)]
        hold = duration - (a0 - peak) / jerk - peak / jerk
        return _pieces(a0, peak, max(0.0, hold), 0.0, jerk)
    b = a0 + duration * jerk
    disc = b * b - 4.0 * jerk * base
    peak = 0.5 * (b - math.sqrt(max(0.0, disc)))
    if peak <= 0.0:
        return _rising(dv, a0, 0.0, math.inf, jerk)
    hold = (dv - _ramp_dv(a0, peak, jerk) - _ramp_dv(peak, 0.0, jerk)) / peak
    return _pieces(a0, peak, max(0.0, hold), 0.0, jerk)


class Ramp:
    """An immutable plan: constant-jerk segments from (v0, a0) to (target, 0)."""

    __slots__ = ("_starts", "_states", "_jerks", "duration", "target", "v0", "a0", "_direction", "_pieces", "_split",
                 "peak_accel")

    def __init__(self, v0: float, a0: float, target: float, direction: float, pieces: list[_Piece], split: int) -> None:
        self.v0 = v0
        self.a0 = a0
        self._direction = direction
        self._pieces = pieces
        self._split = split
        starts: list[float] = []
        states: list[tuple[float, float]] = []
        jerks: list[float] = []
        t, v, a = 0.0, v0, a0
        peak = 0.0
        for duration, normalised_jerk in pieces:
            if duration <= 0.0:
                continue
            jerk = direction * normalised_jerk
            starts.append(t)
            states.append((v, a))
            jerks.append(jerk)
            if a > peak or -a > peak:
                peak = a if a > 0.0 else -a
            v += a * duration + 0.5 * jerk * duration * duration
            a += jerk * duration
            t += duration
        self.peak_accel = peak  # the largest |a| on the way: a is linear in a segment, so at a segment's start
        self._starts = starts
        self._states = states
        self._jerks = jerks
        self.duration = t
        self.target = target

    def at(self, t: float) -> RampState:
        """State at time t after the plan's start; (target, 0, 0) from `duration` on."""
        return RampState(*self.sample(t))

    def sample(self, t: float) -> tuple[float, float, float]:
        """`at(t)` as a plain (v, a, j) tuple, for the shaping cycle's hot path."""
        if t >= self.duration or not self._starts:
            return self.target, 0.0, 0.0
        if t <= 0.0:
            v, a = self._states[0]
            return v, a, self._jerks[0]
        index = bisect_right(self._starts, t) - 1
        dt = t - self._starts[index]
        v, a = self._states[index]
        jerk = self._jerks[index]
        return v + a * dt + 0.5 * jerk * dt * dt, a + jerk * dt, jerk

    def extent(self) -> tuple[float, float]:
        """Lowest and highest v on the way: at segment joints or where the acceleration passes zero."""
        low = high = self.target
        ends = [*self._starts[1:], self.duration]
        for start, end, (v, a), jerk in zip(self._starts, ends, self._states, self._jerks):
            low, high = min(low, v), max(high, v)
            if jerk != 0.0 and 0.0 < -a / jerk < end - start:
                turn_at = -a / jerk
                v_turn = v + 0.5 * a * turn_at
                low, high = min(low, v_turn), max(high, v_turn)
        return low, high

    def joints(self) -> list[float]:
        """Times at which the jerk changes: every segment's start, and the end."""
        return [*self._starts, self.duration]

    def travel(self) -> float:
        """Integral of v over the plan (metres for a speed ramp, radians for a turn-rate ramp)."""
        total = 0.0
        ends = self._starts[1:] + [self.duration]
        for start, end, (v, a), jerk in zip(self._starts, ends, self._states, self._jerks):
            dt = end - start
            total += v * dt + 0.5 * a * dt * dt + jerk * dt**3 / 6.0
        return total


def _normalised_plan(v0: float, a0: float, target: float, limits: AxisLimits) -> tuple[float, list[_Piece], int]:
    """Direction (+1/-1) and pieces in coordinates where the ramp rises; also where the second stage starts."""
    jerk = limits.jerk
    settling = _ramp_dv(a0, 0.0, jerk)
    excess = target - v0 - settling
    # Where bringing a0 to zero lands on the target (a re-plan of a plan already on its last segment), rounding
    # must not flip the direction: rise if a0 >= 0, else fall, so that the plan is that one segment.
    on_course = abs(excess) <= 1e-9 * abs(settling)
    direction = 1.0 if (a0 >= 0.0 if on_course else excess > 0.0) else -1.0
    v0n, a0n, tn = direction * v0, direction * a0, direction * target
    # Speed at the moment the (normalised) acceleration has come up to zero: where the rising part begins.
    v_rise = v0n if a0n >= 0.0 else v0n - a0n * a0n / (2.0 * jerk)
    if tn <= 0.0:
        # |v| shrinks all along the rising part (v <= target <= 0)
        return direction, _rising(tn - v0n, a0n, 0.0, limits.decel, jerk), 0
    if v_rise >= 0.0:
        return direction, _rising(tn - v0n, a0n, 0.0, limits.accel, jerk), 0
    # Crosses zero speed: arrive at v = 0 with an acceleration inside both bounds, then speed up on the far side.
    a_cross = min(limits.accel, limits.decel, math.sqrt(2.0 * jerk * tn))
    if -v0n >= _ramp_dv(a0n, a_cross, jerk):
        first = _rising(-v0n, a0n, a_cross, limits.decel, jerk)
        second = _rising(tn, a_cross, 0.0, limits.accel, jerk)
        return direction, first + second, len(first)
    return direction, _rising(tn - v0n, a0n, 0.0, limits.accel, jerk), 0


def standstill(v: float) -> Ramp:
    """A plan that is already finished: holds v with zero acceleration."""
    return Ramp(v, 0.0, v, 1.0, [], 0)


def plan_ramp(v0: float, a0: float, target: float, limits: AxisLimits) -> Ramp:
    """The time-optimal ramp from (v0, a0) to (target, 0) under `limits`."""
    direction, pieces, split = _normalised_plan(v0, a0, target, limits)
    return Ramp(v0, a0, target, direction, pieces, split)


def stretch_ramp(ramp: Ramp, limits: AxisLimits, duration: float) -> Ramp:
    """The same move made to last exactly `duration` (>= ramp.duration), for arriving together with another axis.

    Only the last stage is lengthened (by lowering its peak acceleration), so every bound still holds.
    """
    if duration <= ramp.duration or ramp.duration <= 0.0:
        return ramp
    direction = ramp._direction
    first = ramp._pieces[: ramp._split]
    v_start, a_start, first_time = direction * ramp.v0, direction * ramp.a0, 0.0
    for piece_time, jerk in first:
        v_start += a_start * piece_time + 0.5 * jerk * piece_time * piece_time
        a_start += jerk * piece_time
        first_time += piece_time
    remaining = duration - first_time
    last = _stretched_rising(direction * ramp.target - v_start, a_start, limits.jerk, remaining)
    if abs(sum(piece_time for piece_time, _ in last) - remaining) > 1e-9 * max(1.0, remaining):
        # a degenerate last stage (a step of a few ulp left after rounding): arrive as planned, then wait there
        last = ramp._pieces[ramp._split :]
        last = last + [(remaining - sum(piece_time for piece_time, _ in last), 0.0)]
    return Ramp(ramp.v0, ramp.a0, ramp.target, direction, first + last, ramp._split)
