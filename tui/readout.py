"""The live readout: verdict and alarm banners, the big swing weight, the numbers, the gauges."""

from __future__ import annotations

from rich.text import Text
from textual.app import ComposeResult
from textual.containers import Horizontal, Vertical
from textual.message import Message
from textual.reactive import reactive, var
from textual.widget import Widget
from textual.widgets import Digits, Static

from heft.daemon.events import Alarm, CaptureStateChanged
from heft.daemon.measurement import CheckResult, Measurement, Verdict
from heft.tui.format import (
    CHECK_NAMES,
    VERDICT_CLASS,
    alarm_banner_text,
    capture_text,
    check_value_text,
    verdict_banner,
    with_u,
)
from heft.tui.state import find_check

_BANNER_CLASSES = ("pass", "near", "fail", "nospec", "idle")


class VerdictBanner(Static):
    """Full-width verdict: the word (PASS / NEAR LIMIT / FAIL / NO SPEC) and why.

    Posts :class:`VerdictBanner.Changed` when it shows another measurement (the bell listens).
    """

    measurement: var[Measurement | None] = var(None)
    waiting: var[str] = var("")
    """Why there is no club yet (e.g. the broker cannot be reached); shown only until one is."""

    class Changed(Message):
        """The banner shows a new measurement."""

        def __init__(self, banner: VerdictBanner, measurement: Measurement) -> None:
            super().__init__()
            self.banner = banner
            self.measurement = measurement

        @property
        def control(self) -> VerdictBanner:
            return self.banner

    def watch_measurement(self, old: Measurement | None, new: Measurement | None) -> None:
        self._draw()
        if new is not None and (old is None or old.id != new.id):
            self.post_message(self.Changed(self, new))

    def watch_waiting(self) -> None:
        if self.measurement is None:
            self._draw()

    def _draw(self) -> None:
        banner = verdict_banner(self.measurement, waiting=self.waiting)
        self.remove_class(*_BANNER_CLASSES)
        self.add_class(banner.css_class)
        text = Text()
        text.append(f" {banner.word} ", style="bold reverse")
        text.append(f"  {banner.reason}")
        self.update(text)


class AlarmBanner(Static):
    """Shown only while an alarm is active and unacknowledged; says so in words.

    Posts :class:`AlarmBanner.Raised` when an alarm joins the unacknowledged ones.
    """

    alarms: var[tuple[Alarm, ...]] = var(())
    """The active, unacknowledged alarms, newest first."""

    class Raised(Message):
        """Alarms that were not in the banner before."""

        def __init__(self, banner: AlarmBanner, keys: frozenset[str]) -> None:
            super().__init__()
            self.banner = banner
            self.keys = keys

        @property
        def control(self) -> AlarmBanner:
            return self.banner

    def __init__(self, *, can_acknowledge: bool = True, id: str | None = None) -> None:
        super().__init__("", id=id)
        self.can_acknowledge = can_acknowledge

    def watch_alarms(self, old: tuple[Alarm, ...], new: tuple[Alarm, ...]) -> None:
        message = alarm_banner_text(list(new), can_acknowledge=self.can_acknowledge)
        self.display = bool(message)
        self.update(Text(message))
        raised = frozenset(a.key for a in new) - {a.key for a in old}
        if raised:
            self.post_message(self.Raised(self, raised))


class CaptureLine(Static):
    """The capture cycle's state in words (with the load on the beam while settling)."""

    capture: var[CaptureStateChanged | None] = var(None)
    load_g: var[float | None] = var(None)

    def watch_capture(
        self, old: CaptureStateChanged | None, new: CaptureStateChanged | None
    ) -> None:
        if old is not None:
            self.remove_class(old.state.value)
        if new is not None:
            self.add_class(new.state.value)
        self._draw()

    def watch_load_g(self) -> None:
        self._draw()

    def _draw(self) -> None:
        capture = self.capture
        text = "capture: no state yet" if capture is None else (
            f"capture: {capture_text(capture, self.load_g)}")
        if text != str(self.content):  # a load that moved below 0.1 g changes nothing here
            self.update(Text(text))


class Readout(Vertical):
    """Swing weight in large digits, then total weight, balance point and moment with their U."""

    measurement: var[Measurement | None] = var(None)

    def compose(self) -> ComposeResult:
        yield Static("SWING WEIGHT (14 in, Lorythmic)", classes="caption")
        with Horizontal(id="sw-row"):
            yield Static("-", id="sw-letter")
            yield Digits("--.-", id="sw-digits")
        yield Static("", id="sw-detail")
        yield Static("", id="numbers")
        yield Static("", id="numbers-oz")
        yield Static("", id="club-line")

    def watch_measurement(self, m: Measurement | None) -> None:
        # The first call comes once the children are composed (the reactive's initial watch).
        digits = self.query_one("#sw-digits", Digits)
        letter = self.query_one("#sw-letter", Static)
        if m is None:
            letter.update("-")
            digits.update("--.-")
            self.query_one("#sw-detail", Static).update("waiting for the first club")
            self.query_one("#numbers", Static).update("")
            self.query_one("#numbers-oz", Static).update("")
            self.query_one("#club-line", Static).update("")
            return
        # Digits draws letters in its own font, where D reads as 0 and G comes out small: the
        # letter goes in a boxed cell of its own and only the number is drawn in Digits.
        head, number = split_label(m.swingweight)
        letter.update(head or "-")
        digits.update(number)
        self.remove_class(*VERDICT_CLASS.values())
        self.add_class(VERDICT_CLASS[m.verdict])
        u = m.swingweight_points_u
        self.query_one("#sw-detail", Static).update(
            f"{m.swingweight_points:.2f} points"
            + (f"  ± {u:.2f} pt (k=2)" if u is not None else "")
        )
        rows = [
            ("total weight", with_u(m.total_weight_g, m.total_weight_g_u, 1, "g")),
            ("balance point", with_u(m.balance_point_in, m.balance_point_in_u, 2, "in")),
            ("moment @14 in", with_u(m.moment_g_in, m.moment_g_in_u, 0, "g·in")),
        ]
        self.query_one("#numbers", Static).update(
            "\n".join(f"{name:<14}{value}" for name, value in rows)
        )
        oz = with_u(m.moment_oz_in, m.moment_oz_in_u, 1, "oz·in")
        self.query_one("#numbers-oz", Static).update(f"{'':<14}{oz}")
        parts = [f"#{m.seq}", m.club or "", m.club_id or "", f"job {m.job or '-'}",
                 f"spec {m.spec or '-'}"]
        self.query_one("#club-line", Static).update(Text("  ".join(p for p in parts if p)))


def split_label(label: str) -> tuple[str, str]:
    """``'D2.0'`` -> ``('D', '2.0')``, ``'G0+'`` -> ``('G', '0+')``; no letter: ``('', label)``."""
    i = 0
    while i < len(label) and label[i].isalpha():
        i += 1
    return label[:i], label[i:].strip()


class ToleranceGauge(Widget):
    """Where a value sits in its spec band: a scale with the band, the limits and a marker.

    The marker line also says INSIDE / ABOVE / BELOW in words.
    """

    DEFAULT_CSS = """
    ToleranceGauge { height: 4; }
    """

    measurement: var[Measurement | None] = var(None)
    check: reactive[CheckResult | None] = reactive(None, layout=False)

    def __init__(self, check_name: str, *, id: str | None = None) -> None:
        super().__init__(id=id)
        self.check_name = check_name

    def watch_measurement(self, m: Measurement | None) -> None:
        # Repaints only when this gauge's own check changed, not on every measurement.
        self.check = find_check(m, self.check_name) if m is not None else None

    def render(self) -> Text:
        title = CHECK_NAMES.get(self.check_name, self.check_name)
        width = max(self.size.width, 20)
        check = self.check
        if check is None or check.low is None or check.high is None:
            return Text(f"{title}: no band in this spec", style="dim")
        return gauge_text(title, check, width)


def gauge_text(title: str, check: CheckResult, width: int) -> Text:
    """Render a band gauge ``width`` cells wide (pure; tested without a terminal)."""
    assert check.low is not None and check.high is not None
    low, high, value = check.low, check.high, check.value
    half = (high - low) / 2 or 1.0
    lo_end = min(low - half, value - half * 0.1)
    hi_end = max(high + half, value + half * 0.1)
    cells = width - 2

    def col(x: float) -> int:
        return round((x - lo_end) / (hi_end - lo_end) * (cells - 1))

    c_low, c_high, c_val = col(low), col(high), col(value)
    c_mid = col((low + high) / 2)
    scale = Text(" ")
    for i in range(cells):
        if i in (c_low, c_high):
            scale.append("┃", style="bold")
        elif c_low < i < c_high:
            scale.append("┼" if i == c_mid else "━", style="green")
        else:
            scale.append("─", style="dim")
    if check.verdict is Verdict.FAIL:
        where, style = ("ABOVE" if value > high else "BELOW"), "bold red"
    elif check.verdict is Verdict.NEAR_LIMIT:
        where, style = "NEAR LIMIT", "bold yellow"
    else:
        where, style = "INSIDE", "bold green"
    marker = Text(" " * (c_val + 1))
    marker.append("▲", style=style)
    label = f" {check_value_text(check)} {where}"
    if c_val + 2 + len(label) > width:
        marker = Text(" " * max(c_val + 1 - len(label), 0))
        marker.append(label + " ", style=style)
        marker.append("▲", style=style)
    else:
        marker.append(label, style=style)
    low_text, high_text = check_value_text(check, low), check_value_text(check, high)
    limits = Text(" " * max(c_low + 1 - len(low_text) // 2, 0))
    limits.append(low_text, style="bold")
    gap = c_high + 1 - len(high_text) // 2 - len(limits.plain)
    limits.append(" " * max(gap, 1))
    limits.append(high_text, style="bold")
    head = Text(f"{title}", style="bold")
    return Text("\n").join([head, scale, marker, limits])
