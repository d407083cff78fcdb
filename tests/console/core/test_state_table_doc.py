"""docs/control-loop.md shows the safety machine's tables exactly as the code has them (issue 9: the docs render the
state table)."""

from __future__ import annotations

from pathlib import Path

from console.core.safety import TRANSITIONS, SafetyState, Trigger, transition_table_markdown

DOC = Path(__file__).resolve().parents[3] / "docs" / "control-loop.md"


def test_the_page_holds_the_generated_tables() -> None:
    text = DOC.read_text(encoding="utf-8")
    begin, end = "<!-- state-table:begin -->\n", "<!-- state-table:end -->"
    shown = text[text.index(begin) + len(begin):text.index(end)]
    assert shown == transition_table_markdown(), "regenerate with console.core.safety.transition_table_markdown()"


def test_every_state_can_be_stopped_and_left() -> None:
    for state in SafetyState:
        assert (state, Trigger.FAIL) in TRANSITIONS
        assert (state, Trigger.STOP) in TRANSITIONS or state is SafetyState.STOPPING
        targets = {rule.target for (source, _), rule in TRANSITIONS.items() if source is state}
        assert targets - {state} or state is SafetyState.STOPPING
