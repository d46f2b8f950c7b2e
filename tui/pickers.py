"""Small modal pickers: job and station. Each returns the chosen name, or None on escape."""

from __future__ import annotations

from typing import ClassVar

from textual.app import ComposeResult
from textual.binding import Binding, BindingType
from textual.containers import Vertical
from textual.screen import ModalScreen
from textual.widgets import Input, OptionList, Static
from textual.widgets.option_list import Option


class _Picker(ModalScreen[str | None]):
    BINDINGS: ClassVar[list[BindingType]] = [Binding("escape", "cancel", "Cancel")]
    TITLE_TEXT = ""
    HINT = "up/down to choose, enter to select, escape to cancel"

    def __init__(self, names: list[str], current: str | None) -> None:
        super().__init__()
        self.names = names
        self.current = current

    def compose(self) -> ComposeResult:
        with Vertical(classes="picker"):
            yield Static(self.TITLE_TEXT, classes="picker-title")
            yield OptionList(
                *(Option(f"{n}{'   (current)' if n == self.current else ''}", id=n)
                  for n in self.names),
                id="picker-list",
            )
            yield from self.extra()
            yield Static(self.HINT, classes="picker-hint")

    def extra(self) -> ComposeResult:
        yield from ()

    def on_mount(self) -> None:
        options = self.query_one(OptionList)
        if self.current in self.names:
            options.highlighted = self.names.index(self.current)
        elif self.names:
            options.highlighted = 0
        options.focus()

    def on_option_list_option_selected(self, event: OptionList.OptionSelected) -> None:
        self.dismiss(event.option.id)

    def action_cancel(self) -> None:
        self.dismiss(None)


class JobPicker(_Picker):
    """Jobs the service knows and jobs seen in measurements, plus a field for a new job name."""

    TITLE_TEXT = "Select the job (sends select_job to the service)"
    HINT = "enter on a job to select it; tab to type a new job name; escape to cancel"

    def extra(self) -> ComposeResult:
        yield Input(placeholder="or type a job name and press enter", id="job-name")

    def on_input_submitted(self, event: Input.Submitted) -> None:
        name = event.value.strip()
        if name:
            self.dismiss(name)


class StationPicker(_Picker):
    """Stations heard from on the broker."""

    TITLE_TEXT = "Show which station?"
