"""Per-channel live values with a sparkline of the last few seconds."""

from __future__ import annotations

from rich.text import Text
from textual.app import ComposeResult
from textual.containers import Horizontal, Vertical
from textual.reactive import var
from textual.widgets import Sparkline, Static

from heft.drivers.reading import Flag
from heft.tui.state import ChannelView

# Words for flags that matter on a bench; the first one present is shown.
_FLAG_WORDS: tuple[tuple[Flag, str], ...] = (
    (Flag.OVERLOAD, "OVERLOAD"),
    (Flag.UNDERLOAD, "UNDERLOAD"),
    (Flag.FAULT, "FAULT"),
    (Flag.MOTION, "motion"),
    (Flag.STABLE, "stable"),
)
_BAD_WORDS = ("OVERLOAD", "UNDERLOAD", "FAULT")


def flag_word(flags: Flag) -> str:
    for flag, word in _FLAG_WORDS:
        if flags & flag:
            return word
    return ""


def _dom_id(channel: str) -> str:
    return "ch-" + "".join(c if c.isalnum() else "-" for c in channel)


def _value_text(view: ChannelView) -> Text:
    value = "-" if view.last_value_g is None else f"{view.last_value_g:9.2f} g"
    return Text(f"{value} {flag_word(view.flags)}")


class ChannelRow(Horizontal):
    """One channel: its name, its latest value and flag word, and a sparkline."""

    view: var[ChannelView] = var[ChannelView](
        lambda: ChannelView("", None, Flag.NONE, ()), init=False
    )

    def __init__(self, view: ChannelView) -> None:
        super().__init__(id=_dom_id(view.channel), classes="channel-row")
        self.channel = view.channel
        self.set_reactive(ChannelRow.view, view)  # compose draws it; no watcher before that

    def compose(self) -> ComposeResult:
        view = self.view
        yield Static(self.channel, classes="channel-name")
        yield Static(_value_text(view), classes="channel-value").set_class(
            flag_word(view.flags) in _BAD_WORDS, "bad"
        )
        yield Sparkline(view.values_g, summary_function=max, classes="channel-spark")

    def watch_view(self, view: ChannelView) -> None:
        cells = self.query(".channel-value")
        if not cells:  # not composed yet: compose reads the newest view itself
            return
        cell = cells.first(Static)
        cell.update(_value_text(view))
        cell.set_class(flag_word(view.flags) in _BAD_WORDS, "bad")
        self.query_one(Sparkline).data = view.values_g


class ChannelsPanel(Vertical):
    """All channels heard from, one row each, in the order they first reported."""

    channels: var[tuple[ChannelView, ...]] = var((), init=False)

    def compose(self) -> ComposeResult:
        yield Static("no live readings yet", classes="empty-note")

    def watch_channels(self, views: tuple[ChannelView, ...]) -> None:
        note = self.query(".empty-note")
        if views and note:
            note.remove()
        for view in views:
            rows = self.query(f"#{_dom_id(view.channel)}")
            if rows:
                rows.first(ChannelRow).view = view
            else:
                self.mount(ChannelRow(view))
