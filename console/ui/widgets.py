"""The drive screen's panels. Each one shows the latest loop snapshot (attributes down) and computes no physics.

Every panel keeps the tuple of values it last drew and repaints only when that tuple changes, so a robot at rest
costs almost nothing to display. Colours come from the .tcss component classes; every state and series is also told
apart by text or glyph, never by colour alone.
"""

from __future__ import annotations

import math
import textwrap
from collections import deque
from typing import TYPE_CHECKING, Any

import numpy as np
from rich.style import Style
from textual.strip import Strip
from textual.widget import Widget

from console.protocol import flag_names
from console.ui.bigtext import big_lines, big_width
from console.ui.braille import BrailleCanvas
from console.ui.keys import DRIVE_KEYS, STOPPING
from console.ui.rows import Rows

if TYPE_CHECKING:
    from console.core.codec import DecoderCounts
    from console.core.step import Snapshot
    from console.profile import Profile


AGE_STEP_MS = 20


def signed(value: float | None, digits: int = 2) -> str:
    """A signed number; one that rounds to zero is written +0.00, never -0.00."""
    if value is None or not math.isfinite(value):
        return "—"
    return f"{round(value, digits) + 0.0:+.{digits}f}"   # + 0.0 turns a negative zero into zero


def _col(value: float, lo: float, hi: float, width: int) -> int:
    """Column of `value` on a scale from lo (column 0) to hi (column width - 1), clipped to the scale."""
    if width <= 1 or hi <= lo:
        return 0
    return min(max(round((value - lo) / (hi - lo) * (width - 1)), 0), width - 1)


def _measured_style(style: Style, stale_s: int | None) -> Style:
    """A measured value's style: dimmed while it is stale (no telemetry since `stale_s` seconds)."""
    return style if stale_s is None else style + Style(dim=True)


def _age(stale_s: int | None, value: float | None) -> str:
    return "" if stale_s is None or value is None else f" ({stale_s} s old)"


class Panel(Widget):
    """A widget that repaints only when its displayed values change.

    Subclasses `paint(width, height) -> Rows`; the strips are kept until the values, the size or the style change.
    """

    def __init__(self, *, id: str | None = None, classes: str | None = None) -> None:
        super().__init__(id=id, classes=classes)
        self._shown: tuple[Any, ...] | None = None
        self._strips: list[Strip] | None = None
        self._strips_size: tuple[int, int] = (0, 0)
        self._styles: dict[str, Style] = {}

    def _update(self, shown: tuple[Any, ...]) -> None:
        if shown != self._shown:
            self._shown = shown
            self._strips = None
            self.refresh()

    def paint(self, width: int, height: int) -> Rows:
        raise NotImplementedError

    def notify_style_update(self) -> None:
        """CSS changed (a state class, a breakpoint): styles and strips must be worked out again."""
        super().notify_style_update()
        self._styles.clear()
        self._strips = None

    def render_line(self, y: int) -> Strip:
        width, height = self.size
        if self._strips is None or (width, height) != self._strips_size:
            self._strips = self.paint(width, height).strips(width, self.rich_style)[:height]
            self._strips_size = (width, height)
        return self._strips[y] if y < len(self._strips) else Strip.blank(width, self.rich_style)

    def text_lines(self) -> list[str]:
        """What the panel shows, as plain text (tests)."""
        return self.paint(*self.size).plain()

    def style_of(self, name: str) -> Style:
        style = self._styles.get(name)
        if style is None:
            style = self._styles[name] = self.get_component_rich_style(name)
        return style


class SafetyBanner(Panel):
    """The safety state in large type, with the cause and what to do next in plain words beneath it."""

    COMPONENT_CLASSES = {"banner--word", "banner--detail"}

    def show(self, state: str, cause: str | None, detail: str) -> None:
        self.set_class(state == "disarmed", "-disarmed")
        self.set_class(state == "armed", "-armed")
        self.set_class(state == "stopping", "-stopping")
        self.set_class(state == "stopped", "-stopped")
        self._update((state, cause, detail))

    def paint(self, width: int, height: int) -> Rows:
        if self._shown is None:
            return Rows()
        state, cause, detail = self._shown
        word = state.upper()
        first = f"{word} — cause: {cause}" if cause else word
        details = [part for line in detail.split("\n") for part in textwrap.wrap(line, max(width, 8)) or [""]]
        text = Rows()
        big = big_lines(word) if big_width(word) <= width else []
        # the big word when it fits with everything else; the plain line (state and cause) is always there
        lines = [*big, first] if big and len(big) + 1 + len(details) <= height else [first]
        for line in lines:
            text.append(line + "\n", self.style_of("banner--word"))
        text.append("\n".join(details[:max(height - len(lines), 1)]), self.style_of("banner--detail"))
        return text.centred(width)


class TitleBar(Panel):
    """One line: program, robot name, driving mode, link, loop time, nudge steps; the later parts give way first
    when the line is too short, the robot's name never."""

    def show(self, profile_name: str, url: str, mode: str, steps: str, t_s: float) -> None:
        self._update((profile_name, url, mode, steps, int(t_s)))

    def paint(self, width: int, height: int) -> Rows:
        if self._shown is None:
            return Rows()
        name, url, mode, steps, t_s = self._shown
        text = Rows().append(" diffdeck drive ", "bold reverse").append(" ").append(name, "bold")
        used = len(" diffdeck drive  ") + len(name)
        for part in (f"{mode.upper()} mode", f"link {url}", f"t {t_s} s", f"steps {steps}"):
            if used + 3 + len(part) > width:
                break
            text.append(" · ").append(part, "bold" if part.endswith(" mode") else None)
            used += 3 + len(part)
        return text


class HintBar(Panel):
    """The keys that matter most (the bindings marked `show`), always in view; `?` opens the full list.

    The stop keys (quit among them) come first, then `?`; the other keys follow while whole ones fit, so a narrow
    terminal loses a driving hint, never a stop key. `keys` replaces the bindings' rows (an overlay's own line).
    """

    def __init__(self, keys: tuple[tuple[str, str], ...] | None = None, *, id: str | None = None) -> None:
        super().__init__(id=id)
        self.keys = keys

    def on_mount(self) -> None:
        if self.keys is not None:
            self._update(self.keys)
            return
        first = [row for row in DRIVE_KEYS if row.hint and row.group == STOPPING.description]
        helps = [row for row in DRIVE_KEYS if row.hint and row.shown == "?"]
        rest = [row for row in DRIVE_KEYS if row.hint and row not in first and row not in helps]
        self._update(tuple((row.shown, row.short) for row in (*first, *helps, *rest)))

    def paint(self, width: int, height: int) -> Rows:
        text = Rows()
        used = 0
        for key, what in self._shown or ():
            cells = len(key) + len(what) + 4
            if used + cells > width and used:
                continue
            text.append(f" {key} ", "bold reverse")
            text.append(f" {what} ")
            used += cells
        return text


def _decoder_text(decoder: DecoderCounts) -> str:
    """The decoder's non-zero discard counters (crc, overlong, unknown, malformed lines; noise bytes), or "none"."""
    parts = [f"{name} {count}" for name, count in (
        ("crc", decoder.crc_errors), ("long", decoder.overlong_lines), ("unk", decoder.unknown_frames),
        ("bad", decoder.malformed)) if count]
    if decoder.noise_bytes:
        parts.append(f"noise {decoder.noise_bytes} B")
    return " ".join(parts) or "none"


class LinkPanel(Panel):
    """Link health and loop timing: the first thing to read when the robot does not do what the screen says. The
    rows go by importance (a short panel cuts the last ones): telemetry, battery and robot flags before timing."""

    COUNTS_EVERY_S = 1.0
    """The frame counters go up every cycle: shown once a second, or every panel repaint would be theirs."""

    def __init__(self, *, id: str | None = None, classes: str | None = None) -> None:
        super().__init__(id=id, classes=classes)
        self._counts: tuple[int, int] = (0, 0)
        self._counts_t_s = -math.inf

    def show(self, snap: Snapshot, rate_set_hz: float) -> None:
        link, loop = snap.link, snap.loop
        # shown in coarse steps: the exact jitter of a healthy link is noise, and every change costs a repaint
        age = None if link.telemetry_age_s is None else AGE_STEP_MS * max(1, math.ceil(
            link.telemetry_age_s * 1000.0 / AGE_STEP_MS))
        rtt = None if link.rtt_s is None else round(link.rtt_s * 1000.0)
        if abs(snap.t_s - self._counts_t_s) >= self.COUNTS_EVERY_S:
            self._counts, self._counts_t_s = (link.frames_sent, link.telemetry_received), snap.t_s
        self._update((
            link.url, round(link.rate_hz, 1), rate_set_hz, rtt, age, link.decoder, *self._counts,
            None if snap.battery_v is None else round(snap.battery_v, 1), snap.flags,
            round(loop.period_error_p99_s * 1e3, 2), round(loop.period_error_max_s * 1e3, 2), loop.overruns,
        ))

    def paint(self, width: int, height: int) -> Rows:
        if self._shown is None:
            return Rows()
        url, rate, rate_set, rtt, age, decoder, sent, received, battery, flags, p99, pmax, overruns = self._shown
        names = flag_names(flags)
        rows = [
            ("url", url),
            ("rate", f"{rate:.1f} of {rate_set:g} Hz"),
            ("telemetry", "none yet" if age is None else f"≤ {age} ms ago"),
            ("battery", ("—" if battery is None else f"{battery:.1f} V") + (f"  {' '.join(names)}" if names else "")),
            ("errors", _decoder_text(decoder)),
            ("round trip", "—" if rtt is None else f"{rtt} ms"),
            ("loop late", f"p99 {p99:.2f} max {pmax:.{1 if pmax >= 10.0 else 2}f} ms"),
            ("missed", f"{overruns} period" + ("" if overruns == 1 else "s")),
            ("frames", f"tx {sent} rx {received}"),
        ]
        text = Rows()
        for i, (name, value) in enumerate(rows):
            text.append(f"{name:<11}", "dim")
            text.append(value + ("\n" if i < len(rows) - 1 else ""))
        return text


class AxisGauge(Panel):
    """One axis on one scale: request (▼), envelope target (▽), shaped output (bar), measured (▲), bounds (┃)."""

    COMPONENT_CLASSES = {"gauge--req", "gauge--target", "gauge--out", "gauge--meas", "gauge--bound", "gauge--nogo"}

    def __init__(self, title: str, unit: str, scale_lo: float, scale_hi: float, digits: int = 2,
                 *, id: str | None = None) -> None:
        super().__init__(id=id)
        self.title = title
        self.unit = unit
        self.scale_lo = scale_lo
        self.scale_hi = scale_hi
        self.digits = digits

    def show(self, req: float, target: float, out: float, meas: float | None, bound_lo: float,
             bound_hi: float, stale_s: int | None = None) -> None:
        """`stale_s`: the measured value is that many seconds old (the link is lost): dimmed, with its age."""
        d = self.digits
        self._update((round(req, d), round(target, d), round(out, d), None if meas is None else round(meas, d),
                      round(bound_lo, d), round(bound_hi, d), stale_s))

    def paint(self, width: int, height: int) -> Rows:
        if self._shown is None:
            return Rows()
        req, target, out, meas, bound_lo, bound_hi, stale_s = self._shown
        meas_style = _measured_style(self.style_of("gauge--meas"), stale_s)
        d, width = self.digits, max(width, 10)
        lo, hi = self.scale_lo, self.scale_hi
        text = Rows()
        wide = width >= 64
        text.append(f"{self.title} {self.unit}".ljust(14 if wide else 11), "bold")
        text.append("▼ req " if wide else "▼")
        text.append(signed(req, d), self.style_of("gauge--req"))
        if abs(target - req) > 10 ** -d / 2:
            text.append("  ▽ target " if wide else " ▽")
            text.append(signed(target, d), self.style_of("gauge--target"))
        text.append("  █ out " if wide else " █")
        text.append(signed(out, d), self.style_of("gauge--out"))
        text.append("  ▲ meas " if wide else " ▲")
        text.append(signed(meas, d) + _age(stale_s, meas), meas_style)
        text.append("\n")

        markers = [" "] * width
        marker_styles: list[Style | None] = [None] * width
        if abs(target - req) > 10 ** -d / 2:
            c = _col(target, lo, hi, width)
            markers[c], marker_styles[c] = "▽", self.style_of("gauge--target")
        c = _col(req, lo, hi, width)
        markers[c], marker_styles[c] = "▼", self.style_of("gauge--req")
        _append_cells(text, markers, marker_styles)
        text.append("\n")

        zero, c_lo, c_hi, c_out = (_col(v, lo, hi, width) for v in (0.0, bound_lo, bound_hi, out))
        bar: list[str] = []
        bar_styles: list[Style | None] = []
        for c in range(width):
            if c in (c_lo, c_hi):
                bar.append("┃")
                bar_styles.append(self.style_of("gauge--bound"))
            elif c < c_lo or c > c_hi:
                bar.append("░")
                bar_styles.append(self.style_of("gauge--nogo"))
            elif min(zero, c_out) <= c <= max(zero, c_out) and abs(out) > 10 ** -(d + 1) / 2:
                bar.append("█")
                bar_styles.append(self.style_of("gauge--out"))
            else:
                bar.append("┼" if c == zero else "─")
                bar_styles.append(None)
        _append_cells(text, bar, bar_styles)
        text.append("\n")

        labels = [" "] * width
        label_styles: list[Style | None] = [None] * width
        c_meas = None if meas is None else _col(meas, lo, hi, width)
        lo_text, hi_text = signed(bound_lo, d), signed(bound_hi, d)
        _put(labels, _beside(max(c_lo - len(lo_text) + 1, 0), len(lo_text), c_meas, width), lo_text)
        _put(labels, _beside(min(c_hi, width - len(hi_text)), len(hi_text), c_meas, width), hi_text)
        _put(labels, zero, "0")
        if c_meas is not None:
            labels[c_meas], label_styles[c_meas] = "▲", meas_style
        _append_cells(text, labels, label_styles)
        return text


def _beside(start: int, length: int, keep_clear: int | None, width: int) -> int:
    """Where a label of `length` cells goes so that it does not cover the measured marker: at `start`, or moved
    just past the marker (just before it when there is no room after)."""
    if keep_clear is None or not start <= keep_clear < start + length:
        return start
    return keep_clear + 1 if keep_clear + 1 + length <= width else max(0, keep_clear - length)


def _put(cells: list[str], start: int, word: str) -> None:
    for i, char in enumerate(word):
        if 0 <= start + i < len(cells):
            cells[start + i] = char


def _append_cells(text: Rows, chars: list[str], styles: list[Style | None]) -> None:
    run_start = 0
    for i in range(1, len(chars) + 1):
        if i == len(chars) or styles[i] != styles[run_start]:
            text.append("".join(chars[run_start:i]), styles[run_start])
            run_start = i


class WheelPanel(Panel):
    """Both wheels: commanded (bar) and measured (▲), rad/s and the firmware's unit, saturation bound (┃) marked."""

    COMPONENT_CLASSES = {"wheel--cmd", "wheel--meas", "wheel--bound", "wheel--nogo", "wheel--sat"}

    def __init__(self, profile: Profile, *, id: str | None = None) -> None:
        super().__init__(id=id)
        self.bound_radps = profile.limits.wheel_rate_radps
        self.per_radps = profile.units.per_radps
        self.suffix = profile.units.suffix
        self.signs = (-1.0 if profile.units.invert_left else 1.0, -1.0 if profile.units.invert_right else 1.0)
        full_scale = self.bound_radps * self.per_radps      # the firmware value at the wheel-rate limit
        self.unit_digits = 3 if full_scale < 10.0 else 1 if full_scale < 1000.0 else 0

    def show(self, snap: Snapshot, stale_s: int | None = None) -> None:
        s = snap.shaped
        self._update((
            round(s.left_radps, 2), round(s.right_radps, 2), round(snap.left_cmd, self.unit_digits),
            round(snap.right_cmd, self.unit_digits),
            None if snap.left_meas_radps is None else round(snap.left_meas_radps, 1),
            None if snap.right_meas_radps is None else round(snap.right_meas_radps, 1), stale_s,
        ))

    def paint(self, width: int, height: int) -> Rows:
        if self._shown is None:
            return Rows()
        left, right, left_cmd, right_cmd, left_meas, right_meas, stale_s = self._shown
        meas_style = _measured_style(self.style_of("wheel--meas"), stale_s)
        width = max(width, 20)
        text = Rows()
        bound = self.bound_radps
        scale = 1.15 * bound
        wheels = (("left ", left, left_cmd, left_meas, self.signs[0]), ("right", right, right_cmd, right_meas,
                                                                          self.signs[1]))
        for i, (name, radps, wire, meas, sign) in enumerate(wheels):
            saturated = abs(radps) >= bound - 1e-6
            u = self.unit_digits
            meas_unit = "—" if meas is None else signed(meas * self.per_radps * sign, u)
            wire_text, age = signed(wire, u), _age(stale_s, meas)
            cmd, meas_s = self.style_of("wheel--cmd"), meas_style
            # the first form that fits whole: rad/s (the unit included) is never cut, the firmware's unit goes first
            forms: list[list[tuple[str, Style | str | None]]] = [
                [(f"{name} ", "bold"), (f"cmd {signed(radps)} rad/s ({wire_text} {self.suffix})  ", cmd),
                 (f"meas {signed(meas, 1)} rad/s ({meas_unit} {self.suffix}){age}", meas_s)],
                [(f"{name[0].upper()} ", "bold"), (f"▆{signed(radps, 1)} ", cmd),
                 (f"▲{signed(meas, 1)} rad/s ", meas_s), (f"▆{wire_text} ", cmd),
                 (f"▲{meas_unit} {self.suffix}{age}", meas_s)],
                [(f"{name[0].upper()} ", "bold"), (f"▆{signed(radps, 1)} ", cmd),
                 (f"▲{signed(meas, 1)} rad/s{age}", meas_s)],
            ]
            flag: list[tuple[str, Style | str | None]] = []
            if saturated:
                flag.append(("  AT BOUND", self.style_of("wheel--sat")))
            candidates = [form + flag for form in forms]
            line = next((c for c in candidates if sum(len(part) for part, _ in c) <= width), candidates[-1])
            for part, style in line:
                text.append(part, style)
            text.append("\n")
            zero, c_lo, c_hi, c_cmd = (_col(v, -scale, scale, width) for v in (0.0, -bound, bound, radps))
            c_meas = None if meas is None else _col(meas, -scale, scale, width)
            cells: list[str] = []
            styles: list[Style | None] = []
            for c in range(width):
                if c == c_meas:
                    cells.append("▲")
                    styles.append(meas_style)
                elif c in (c_lo, c_hi):
                    cells.append("┃")
                    styles.append(self.style_of("wheel--bound"))
                elif c < c_lo or c > c_hi:
                    cells.append("░")
                    styles.append(self.style_of("wheel--nogo"))
                elif min(zero, c_cmd) <= c <= max(zero, c_cmd) and abs(radps) >= 0.005:
                    cells.append("▆")
                    styles.append(self.style_of("wheel--cmd"))
                else:
                    cells.append("┼" if c == zero else "─")
                    styles.append(None)
            _append_cells(text, cells, styles)
            if i == 0:
                text.append("\n")
        return text


class LimitPanel(Panel):
    """Which limit binds right now and how much of the acceleration and jerk budget the ramps use."""

    COMPONENT_CLASSES = {"limit--bound", "limit--free", "limit--use", "limit--stop"}

    def show(self, snap: Snapshot) -> None:
        s = snap.shaped
        self._update((
            None if s.bound is None else s.bound.value, round(s.accel_use, 2), round(s.jerk_use, 2),
            None if s.stopping is None else s.stopping.value, s.settled, s.rejected,
        ))

    def paint(self, width: int, height: int) -> Rows:
        if self._shown is None:
            return Rows()
        bound, accel_use, jerk_use, stopping, settled, rejected = self._shown
        width = max(width, 20)
        text = Rows()
        text.append("binds      ", "dim")
        if bound is None:
            text.append("none (request passes)\n", self.style_of("limit--free"))
        else:
            text.append(f"{bound.upper()} LIMIT\n", self.style_of("limit--bound"))
        bar_width = max(width - 17, 4)
        for name, use in (("accel use", accel_use), ("jerk use", jerk_use)):
            filled = round(min(max(use, 0.0), 1.0) * bar_width)
            text.append(f"{name:<11}", "dim")
            text.append("■" * filled, self.style_of("limit--use"))
            text.append("·" * (bar_width - filled), "dim")
            text.append(f" {use * 100:3.0f} %\n")
        text.append("ramps      ", "dim")
        if stopping is not None:
            text.append(f"{stopping} stop", self.style_of("limit--stop"))
        else:
            text.append("settled" if settled else "moving")
        if rejected:
            text.append("  request rejected (not finite)", self.style_of("limit--stop"))
        return text


class EventLog(Panel):
    """The last events (arming, stops and causes, link changes, limit events, console notes), newest at the bottom."""

    COMPONENT_CLASSES = {"event--time", "event--ui"}

    def __init__(self, *, id: str | None = None, keep: int = 200) -> None:
        super().__init__(id=id)
        self.lines: deque[tuple[float, str, str]] = deque(maxlen=keep)
        self._last_loop_event: object | None = None
        self._count = 0

    def add_loop(self, events: tuple[Any, ...]) -> None:
        """Append the loop's events newer than the last one shown (the snapshot carries a sliding window)."""
        if not events or events[-1] == self._last_loop_event:
            return
        start = 0
        for i in range(len(events) - 1, -1, -1):
            if events[i] == self._last_loop_event:
                start = i + 1
                break
        for event in events[start:]:
            kind = getattr(event.kind, "value", event.kind)
            self._append((event.t_s, event.text, str(kind)))
        self._last_loop_event = events[-1]

    def add_note(self, t_s: float, text: str) -> None:
        """A line from the console itself (arming window, mode switch, hold released)."""
        self._append((t_s, text, "ui"))

    def _append(self, line: tuple[float, str, str]) -> None:
        self.lines.append(line)
        self._count += 1
        self._update((self._count,))

    def paint(self, width: int, height: int) -> Rows:
        rows = list(self.lines)[-max(height, 1):]
        text = Rows()
        for i, (t_s, message, kind) in enumerate(rows):
            text.append(f"{t_s:8.2f} ", self.style_of("event--time"))
            text.append(f"{kind:<6.6} ", "dim")
            message = message.removeprefix(f"{kind}: ")      # the kind column already says it ("limit: ...")
            text.append(message, self.style_of("event--ui") if kind == "ui" else None)
            if i < len(rows) - 1:
                text.append("\n")
        return text


class TracePlot(Panel):
    """The last `span_s` seconds of requested, shaped and measured speed (top) and turn rate (bottom), in braille."""

    COMPONENT_CLASSES = {"plot--req", "plot--out", "plot--meas", "plot--grid", "plot--label"}
    _REQ, _OUT, _MEAS, _GRID = 4, 5, 6, 1

    def __init__(self, speed_range: tuple[float, float], turn_range: float, span_s: float = 10.0,
                 *, id: str | None = None) -> None:
        super().__init__(id=id)
        self.span_s = span_s
        self.speed_range = speed_range
        self.turn_range = turn_range
        self.samples: deque[tuple[float, ...]] = deque(maxlen=4096)

    def add(self, t_s: float, v_req: float, v_out: float, v_meas: float, w_req: float, w_out: float,
            w_meas: float, *, repaint: bool = True) -> None:
        """One sample per new snapshot time (NaN for a measurement not yet received); repaint only when asked."""
        if self.samples and t_s <= self.samples[-1][0]:
            return
        self.samples.append((t_s, v_req, v_out, v_meas, w_req, w_out, w_meas))
        if repaint:
            self._update((t_s, len(self.samples)))

    def paint(self, width: int, height: int) -> Rows:
        label_w = 7
        plot_rows = max((height - 1) // 2, 1)
        text = Rows()
        text.append(f"last {self.span_s:g}s  ", self.style_of("plot--label"))
        for name, style in (("req", "plot--req"), ("out", "plot--out"), ("meas", "plot--meas")):
            text.append("━━ ", self.style_of(style))
            text.append(f"{name}  ")
        if not self.samples or width <= label_w + 4:
            return text
        data = np.array(self.samples)
        t_end = data[-1, 0]
        data = data[data[:, 0] >= t_end - self.span_s - 0.5]
        cols = width - label_w
        styles = {self._GRID: self.style_of("plot--grid"), self._REQ: self.style_of("plot--req"),
                  self._OUT: self.style_of("plot--out"), self._MEAS: self.style_of("plot--meas")}
        lo_v, hi_v = self.speed_range
        for title, unit, columns, lo, hi in (("speed", "m/s", (1, 2, 3), lo_v, hi_v),
                                             ("turn", "rad/s", (4, 5, 6), -self.turn_range, self.turn_range)):
            canvas = BrailleCanvas(cols, plot_rows)
            x = (data[:, 0] - (t_end - self.span_s)) / self.span_s * (canvas.width - 1)
            zero_y = (hi - 0.0) / (hi - lo) * (canvas.height - 1)
            canvas.hline(zero_y, self._GRID, every=2)
            for second in range(0, int(self.span_s) + 1, 2):
                canvas.vline(second / self.span_s * (canvas.width - 1), self._GRID, every=4)
            for column, layer in zip(columns, (self._REQ, self._OUT, self._MEAS)):
                y = (hi - np.clip(data[:, column], lo, hi)) / (hi - lo) * (canvas.height - 1)
                canvas.polyline(x, y, layer)
            rendered = canvas.to_rows(styles)
            for row, line in enumerate(rendered):
                if row == 0:
                    label = f"{hi:+.1f}"
                elif row == len(rendered) - 1:
                    label = f"{lo:+.1f}"
                elif row == 1:
                    label = title
                elif row == 2:
                    label = unit
                else:
                    label = ""
                text.newline()
                text.append(f"{label:>{label_w - 1}} ", self.style_of("plot--label"))
                text.extend(line)
        return text


class TopView(Panel):
    """The robot seen from above: pose, heading arrow and trail on a metric grid that follows the robot."""

    COMPONENT_CLASSES = {"top--grid", "top--trail", "top--robot", "top--label"}
    _GRID, _TRAIL = 1, 3
    _ARROWS = "→↗↑↖←↙↓↘"
    _SCALES_M = (0.5, 1.0, 2.0, 5.0, 10.0, 20.0, 50.0, 100.0)

    def __init__(self, *, id: str | None = None, keep: int = 3000) -> None:
        super().__init__(id=id)
        self.trail: deque[tuple[float, float]] = deque(maxlen=keep)
        self.pose: tuple[float, float, float] | None = None
        self.source = ""

    def add(self, pose: tuple[float, float, float] | None, source: str, *, repaint: bool = True) -> None:
        """Keep a trail point whenever the robot has moved 1 cm or more; repaint only when asked."""
        if source != self.source:
            self.source = self.border_subtitle = source
        if pose is None:
            return
        x, y, heading = pose
        if not self.trail or math.hypot(x - self.trail[-1][0], y - self.trail[-1][1]) >= 0.01:
            self.trail.append((x, y))
        self.pose = pose
        if repaint:
            self._update((round(x, 3), round(y, 3), round(heading, 2)))

    def paint(self, width: int, height: int) -> Rows:
        text = Rows()
        if self.pose is None:
            text.append("no pose yet", self.style_of("top--label"))
            return text
        x0, y0, heading = self.pose
        canvas = BrailleCanvas(width, max(height - 1, 1))
        # a braille dot is about half a cell wide and a quarter cell high: square on a 1:2 cell
        half_w_dots = canvas.width / 2.0
        trail = np.array(self.trail)
        reach = float(np.max(np.hypot(trail[:, 0] - x0, trail[:, 1] - y0))) if trail.size else 0.0
        half_h_dots = canvas.height / 2.0
        half_view_m = next((s for s in self._SCALES_M if s >= reach), self._SCALES_M[-1])
        m_per_dot = half_view_m / min(half_w_dots, half_h_dots)
        grid_m = half_view_m / 2.0 if half_view_m >= 1.0 else 0.25
        cx, cy = half_w_dots, half_h_dots

        def to_dots(xm: np.ndarray, ym: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
            return cx + (xm - x0) / m_per_dot, cy - (ym - y0) / m_per_dot

        span_x, span_y = half_w_dots * m_per_dot, half_h_dots * m_per_dot
        for gx in np.arange(math.floor((x0 - span_x) / grid_m), math.ceil((x0 + span_x) / grid_m) + 1) * grid_m:
            canvas.vline(float(to_dots(np.array(gx), np.array(0.0))[0]), self._GRID, every=4)
        for gy in np.arange(math.floor((y0 - span_y) / grid_m), math.ceil((y0 + span_y) / grid_m) + 1) * grid_m:
            canvas.hline(float(to_dots(np.array(0.0), np.array(gy))[1]), self._GRID, every=4)
        if trail.size:
            tx, ty = to_dots(trail[:, 0], trail[:, 1])
            canvas.polyline(tx, ty, self._TRAIL)
        arrow = self._ARROWS[round(heading / (math.pi / 4.0)) % 8]
        canvas.mark(int(cx // 2), int(cy // 4), arrow, self.style_of("top--robot"))
        text.append(f"{signed(x0)},{signed(y0)}m {round(math.degrees(heading)) % 360}° grid {grid_m:g}m",
                    self.style_of("top--label"))
        for line in canvas.to_rows({self._GRID: self.style_of("top--grid"), self._TRAIL: self.style_of("top--trail")}):
            text.newline()
            text.extend(line)
        return text


class KeyCard(Panel):
    """A short binding reference for big terminals, from the bindings (the help overlay has the full words). The stop
    keys are left to the hint bar right beneath, which always shows them."""

    def on_mount(self) -> None:
        self._update(tuple((row.shown, row.short) for row in DRIVE_KEYS if row.group != STOPPING.description))

    def paint(self, width: int, height: int) -> Rows:
        text = Rows()
        rows = self._shown or ()
        for i, (key, what) in enumerate(rows):
            text.append(f"{key:<7}", "bold")
            text.append(what + ("\n" if i < len(rows) - 1 else ""))
        return text
