"""Per-channel live values with a sparkline of the last few seconds."""

from __future__ import annotations

from rich.text import Text
from textual.app import ComposeResult
from textual.containers import Horizontal, Vertical
from textual.widgets import Sparkline, Static

from heft.drivers.reading import Flag
from heft.tui.state import ChannelTrace

# Words for flags that matter on a bench; the first one present is shown.
_FLAG_WORDS: tuple[tuple[Flag, str], ...] = (
    (Flag.OVERLOAD, "OVERLOAD"),
    (Flag.UNDERLOAD, "UNDERLOAD"),
    (Flag.FAULT, "FAULT"),
    (Flag.MOTION, "motion"),
    (Flag.STABLE, "stable"),
)


def flag_word(flags: Flag) -> str:
    for flag, word in _FLAG_WORDS:
        if flags & flag:
            return word
    return ""


def _dom_id(channel: str) -> str:
    return "ch-" + "".join(c if c.isalnum() else "-" for c in channel)


class ChannelRow(Horizontal):
    """One channel: its name, its latest value and flag word, and a sparkline."""

    def __init__(self, channel: str) -> None:
        super().__init__(id=_dom_id(channel), classes="channel-row")
        self.channel = channel

    def compose(self) -> ComposeResult:
        yield Static(self.channel, classes="channel-name")
        yield Static("-", classes="channel-value")
        yield Sparkline([], summary_function=max, classes="channel-spark")

    def show(self, trace: ChannelTrace) -> bool:
        """Show the trace; False while the row's own widgets are still being mounted."""
        if not self.query(".channel-value"):
            return False
        value = "-" if trace.last_value_g is None else f"{trace.last_value_g:9.2f} g"
        word = flag_word(trace.flags)
        cell = self.query_one(".channel-value", Static)
        cell.update(Text(f"{value} {word}"))
        cell.set_class(word in ("OVERLOAD", "UNDERLOAD", "FAULT"), "bad")
        self.query_one(Sparkline).data = list(trace.values_g)
        return True


class ChannelsPanel(Vertical):
    """All channels heard from, one row each, in the order they first reported."""

    def compose(self) -> ComposeResult:
        yield Static("no live readings yet", classes="empty-note")

    def show(self, traces: dict[str, ChannelTrace]) -> bool:
        """Update the rows; True when a row is not filled yet (it fills on a later call)."""
        added = False
        note = self.query(".empty-note")
        if traces and note:
            note.remove()
        for channel, trace in traces.items():
            rows = self.query(f"#{_dom_id(channel)}")
            if rows:
                added |= not rows.first(ChannelRow).show(trace)
            else:
                self.mount(ChannelRow(channel))  # filled on the next refresh, once composed
                added = True
        return added
