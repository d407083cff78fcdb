"""Every safety state, stop cause and transition of the control loop, in one table (docs/control-loop.md renders it).

The machine knows nothing of frames or the shaper: `SafetyMachine.fire` looks the (state, trigger) pair up in
`TRANSITIONS`, applies the row's guard and returns the `Transition` taken (or None), which the loop core turns into
shaper calls and stop frames. A trigger is "arm", "settled" (the shaped output reached rest while stopping) or one of
the stop causes; `CAUSES` says, per cause, which stop kind it brings and what detects it.
"""

from __future__ import annotations

import enum
from dataclasses import dataclass

from shaping.shaper import StopKind


class SafetyState(enum.Enum):
    DISARMED = "disarmed"
    ARMED = "armed"
    STOPPING = "stopping"
    STOPPED = "stopped"


class StopCause(enum.Enum):
    OPERATOR = "operator"
    SIGNAL = "signal"
    DEADMAN = "deadman"
    LINK_LOST = "link lost"
    UI_STALL = "UI stall"
    INPUT_LOST = "input lost"
    WATCHDOG = "watchdog trip"
    FAULT = "fault"
    ESTOP = "emergency stop"
    PROGRAM_END = "program end"
    LOOP_FAILURE = "loop failure"


class Trigger(enum.Enum):
    ARM = "arm"
    SETTLED = "settled"
    STOP = "stop"          # any stop cause (see CAUSES)
    FAIL = "loop failure"  # an error inside a control cycle: stop frames of category 0 from now on


class Guard(enum.Enum):
    ALWAYS = "always"
    ARMING_POSSIBLE = "arming possible"     # a live link, current telemetry, no FAULT / ESTOP from the robot
    HARSHER = "harsher stop"                # only a harsher stop kind than the one in force
    NEVER = "refused"                       # logged as refused, nothing changes


@dataclass(frozen=True, slots=True)
class Rule:
    target: SafetyState
    guard: Guard
    note: str


TRANSITIONS: dict[tuple[SafetyState, Trigger], Rule] = {
    (SafetyState.DISARMED, Trigger.ARM): Rule(SafetyState.ARMED, Guard.ARMING_POSSIBLE,
                                              "shaper reset, request cleared; the first frame is the release W 0, 0"),
    (SafetyState.DISARMED, Trigger.STOP): Rule(SafetyState.STOPPED, Guard.ALWAYS,
                                               "stop frames of the cause's category from now on"),
    (SafetyState.ARMED, Trigger.STOP): Rule(SafetyState.STOPPING, Guard.ALWAYS,
                                            "the shaper ramps to zero with the stop kind's limits"),
    (SafetyState.STOPPING, Trigger.ARM): Rule(SafetyState.STOPPING, Guard.NEVER, "refused: still stopping"),
    (SafetyState.STOPPING, Trigger.STOP): Rule(SafetyState.STOPPING, Guard.HARSHER,
                                               "a harsher stop replaces the one in progress, never a softer one"),
    (SafetyState.STOPPING, Trigger.SETTLED): Rule(SafetyState.STOPPED, Guard.ALWAYS,
                                                  "stop frames of the stop's category every period"),
    (SafetyState.STOPPED, Trigger.ARM): Rule(SafetyState.ARMED, Guard.ARMING_POSSIBLE,
                                             "re-arming: as from disarmed (a new release frame)"),
    (SafetyState.STOPPED, Trigger.STOP): Rule(SafetyState.STOPPED, Guard.HARSHER,
                                              "a harsher stop changes the category sent"),
    **{(state, Trigger.FAIL): Rule(SafetyState.STOPPED, Guard.ALWAYS, "category 0 stop frames until the run ends")
       for state in SafetyState},
}
"""(state, trigger) -> rule. A pair not listed changes nothing (arming while armed, settled while not stopping)."""


@dataclass(frozen=True, slots=True)
class CauseRule:
    kind: StopKind | None       # None: the stop kind is the caller's (operator, signal)
    watched_in: frozenset[SafetyState]
    detected_by: str


_MOVING = frozenset({SafetyState.ARMED, SafetyState.STOPPING})
_ALL = frozenset(SafetyState)

CAUSES: dict[StopCause, CauseRule] = {
    StopCause.OPERATOR: CauseRule(None, _ALL, "a stop key, or Ctrl-C in play and bench (repeats escalate)"),
    StopCause.SIGNAL: CauseRule(None, _ALL, "SIGTERM or SIGHUP to a verb that moves a robot (repeats escalate)"),
    StopCause.PROGRAM_END: CauseRule(StopKind.CONTROLLED, _ALL, "a trace or bench program ended, or the console quit"),
    StopCause.DEADMAN: CauseRule(StopKind.CONTROLLED, frozenset({SafetyState.ARMED}),
                                 "no operator keep-alive for the operator timeout (latched driving)"),
    StopCause.UI_STALL: CauseRule(StopKind.FAST, _MOVING, "no UI heartbeat for the UI timeout"),
    StopCause.INPUT_LOST: CauseRule(StopKind.FAST, _ALL,
                                    "the input device driving (drive --input) went away: unplugged, flat battery, "
                                    "read error, its FIFO closed"),
    StopCause.LINK_LOST: CauseRule(StopKind.IMMEDIATE, _MOVING,
                                   "the port went away, or no valid telemetry for telemetry_timeout_s"),
    StopCause.WATCHDOG: CauseRule(StopKind.IMMEDIATE, _MOVING, "telemetry answering the release frame has WATCHDOG"),
    StopCause.FAULT: CauseRule(StopKind.IMMEDIATE, _MOVING, "telemetry answering the release frame has FAULT"),
    StopCause.ESTOP: CauseRule(StopKind.IMMEDIATE, _MOVING, "telemetry answering the release frame has ESTOP"),
    StopCause.LOOP_FAILURE: CauseRule(StopKind.IMMEDIATE, _ALL, "an error inside a control cycle (a bug)"),
}
"""Why: where the console can no longer see the robot, or the robot has already cut its motors, ramping commands
down would only restart motion: zero at once instead. A lost link changes the state only while frames could move the
robot; in any state the link monitor reports it (the panel says "link lost, robot state unknown")."""

STOP_CATEGORY = {StopKind.IMMEDIATE: 0, StopKind.FAST: 1, StopKind.CONTROLLED: 2}
"""Stop categories of the machinery-safety standard for electrical equipment (IEC 60204-1, 9.2.2): 0 remove drive
power at once, 1 controlled stop then remove power, 2 controlled stop with power kept. (A software stop is not
safety-rated.)"""

KIND_RANK = {None: 0, StopKind.CONTROLLED: 1, StopKind.FAST: 2, StopKind.IMMEDIATE: 3}


@dataclass(frozen=True, slots=True)
class Transition:
    source: SafetyState
    target: SafetyState
    trigger: Trigger
    kind: StopKind | None
    cause: StopCause | None


class SafetyMachine:
    """The current state, the cause and kind of the stop in force, and `fire` (the only way any of them changes)."""

    def __init__(self) -> None:
        self.state = SafetyState.DISARMED
        self.cause: StopCause | None = None
        self.kind: StopKind | None = None

    @property
    def moving(self) -> bool:
        """Armed or stopping: motion frames go out (the robot may be moving)."""
        return self.state in _MOVING

    @property
    def category(self) -> int:
        """The stop category the stop in force sends (0, the strongest, should a stop ever lack its kind)."""
        return STOP_CATEGORY[self.kind] if self.kind is not None else 0

    @property
    def cause_text(self) -> str:
        return self.cause.value if self.cause is not None else "no cause"

    def watches(self, cause: StopCause) -> bool:
        return self.state in CAUSES[cause].watched_in

    def fire(self, trigger: Trigger, *, arming_refusal: str | None = None, cause: StopCause | None = None,
             kind: StopKind | None = None) -> Transition | str | None:
        """Apply one trigger. Returns the transition taken, a refusal text (arming), or None (nothing changes)."""
        rule = TRANSITIONS.get((self.state, trigger))
        if rule is None:
            return None
        if trigger is Trigger.FAIL:
            cause = StopCause.LOOP_FAILURE
        if cause is not None:
            if trigger is Trigger.STOP and not self.watches(cause):
                return None                  # e.g. a lost link while disarmed: nothing to stop
            kind = CAUSES[cause].kind or kind or StopKind.CONTROLLED
        if rule.guard is Guard.NEVER:
            return rule.note.removeprefix("refused: ")
        if rule.guard is Guard.ARMING_POSSIBLE and arming_refusal is not None:
            return arming_refusal
        if rule.guard is Guard.HARSHER and KIND_RANK[kind] <= KIND_RANK[self.kind]:
            return None
        transition = Transition(self.state, rule.target, trigger, kind, cause)
        self.state = rule.target
        if trigger is Trigger.ARM:
            self.cause = self.kind = None
        elif cause is not None:
            self.cause, self.kind = cause, kind
        return transition


def transition_table_markdown() -> str:
    """The two tables of this module as Markdown (docs/control-loop.md holds this text; a test keeps them equal)."""
    lines = ["| state | trigger | guard | next state | what happens |", "|---|---|---|---|---|"]
    shown: set[tuple[Trigger, Rule]] = set()
    for (state, trigger), rule in TRANSITIONS.items():
        every = all(TRANSITIONS.get((other, trigger)) == rule for other in SafetyState)
        if every and (trigger, rule) in shown:
            continue
        shown.add((trigger, rule))
        where = "any" if every else state.value
        lines.append(f"| {where} | {trigger.value} | {rule.guard.value} | {rule.target.value} | {rule.note} |")
    lines += ["", "| stop cause | stop kind | watched while | detected by |", "|---|---|---|---|"]
    for cause, cause_rule in CAUSES.items():
        kind = cause_rule.kind.value if cause_rule.kind is not None else "as asked"
        states = ", ".join(s.value for s in SafetyState if s in cause_rule.watched_in)
        lines.append(f"| {cause.value} | {kind} | {states} | {cause_rule.detected_by} |")
    return "\n".join(lines) + "\n"
