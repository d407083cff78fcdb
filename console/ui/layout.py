"""The drive screen's panels in their places, once: the live console (`DriveScreen`) and replay (`ReplayScreen`)
show the same panels in the same layout, and only the parts that differ are handed in (title bar, link panel, key
card, event log, what sits below)."""

from __future__ import annotations

from collections.abc import Iterable
from typing import TYPE_CHECKING

from textual.app import ComposeResult
from textual.containers import Horizontal, Vertical
from textual.screen import Screen
from textual.widget import Widget

from console.ui.widgets import AxisGauge, LimitPanel, SafetyBanner, TopView, TracePlot, WheelPanel

if TYPE_CHECKING:
    from console.profile import Profile


class PanelScreen(Screen[None]):
    """A screen with the drive layout; `find_panels()` (from on_mount) fills the shared panel attributes."""

    banner: SafetyBanner
    limit_panel: LimitPanel
    speed_gauge: AxisGauge
    turn_gauge: AxisGauge
    wheel_panel: WheelPanel
    plot: TracePlot
    top_view: TopView

    @staticmethod
    def drive_layout(profile: Profile, *, title: Widget, left: Iterable[Widget], keys: Widget, events: Widget,
                     below: Iterable[Widget] = ()) -> ComposeResult:
        """Title; left column: the safety banner, `left`, the shaping panel, `keys`; right column: both gauges,
        the wheels, the plot beside the top view, `events`; then `below`."""
        envelope = profile.envelope
        top, reverse, turn = envelope.top_speed_mps, envelope.top_reverse_speed_mps, envelope.top_turn_rate_radps
        margin = 0.12 * (top + reverse)
        yield title
        with Horizontal(id="body"):
            with Vertical(id="left"):
                yield SafetyBanner(id="banner")
                yield from left
                yield LimitPanel(id="limits")
                yield keys
            with Vertical(id="right"):
                with Vertical(id="gauges"):
                    yield AxisGauge("speed", "m/s", -reverse - margin, top + margin, id="speed")
                    yield AxisGauge("turn", "rad/s", -1.12 * turn, 1.12 * turn, id="turn")
                yield WheelPanel(profile, id="wheels")
                with Horizontal(id="views"):
                    yield TracePlot((-reverse - margin, top + margin), 1.12 * turn, id="plot")
                    yield TopView(id="top")
                yield events
        yield from below

    def find_panels(self, profile: Profile, *, link_title: str, events_title: str) -> None:
        """Border titles on, the shared panels found."""
        titles = {
            "#link": link_title, "#limits": "shaping", "#keys": "keys", "#gauges": "request · envelope · output",
            "#wheels": f"wheels (limit ±{profile.limits.wheel_rate_radps:g} rad/s)", "#plot": "trace",
            "#top": "top view", "#events": events_title,
        }
        for selector, title in titles.items():
            self.query_one(selector).border_title = title
        self.banner = self.query_one(SafetyBanner)
        self.limit_panel = self.query_one(LimitPanel)
        self.speed_gauge = self.query_one("#speed", AxisGauge)
        self.turn_gauge = self.query_one("#turn", AxisGauge)
        self.wheel_panel = self.query_one(WheelPanel)
        self.plot = self.query_one(TracePlot)
        self.top_view = self.query_one(TopView)
