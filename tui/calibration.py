"""Calibration of one load-cell channel: zero, span with a reference mass, verify, result.

Each step sends one command (calibrate_zero, calibrate_span, verify) and moves on only when the
service accepts it; a refusal stays on the step with the service's message.
"""

from __future__ import annotations

from collections.abc import Awaitable, Callable, Mapping
from typing import Any, ClassVar

from rich.text import Text
from textual import work
from textual.app import ComposeResult
from textual.binding import Binding, BindingType
from textual.containers import Horizontal, Vertical
from textual.reactive import var
from textual.screen import Screen
from textual.widgets import Button, ContentSwitcher, Footer, Input, OptionList, Static
from textual.widgets.option_list import Option

from heft.daemon.command_api import CalibrateSpan, CalibrateZero, Command, Reply, VerifyCheckMass
from heft.drivers.units import UnitError, parse_quantity

STEPS = ("step-pick", "step-zero", "step-span", "step-verify", "step-result")
STEP_TITLES = {
    "step-pick": "Choose the load-cell channel",
    "step-zero": "Step 1 of 4 - zero",
    "step-span": "Step 2 of 4 - span with a reference mass",
    "step-verify": "Step 3 of 4 - verify with a check mass",
    "step-result": "Step 4 of 4 - result",
}
# Reply data the result step shows when the service sends it, in this order.
RESULT_FIELDS = (
    ("zero_counts", "zero (counts)"),
    ("counts_per_g", "span (counts per g)"),
    ("result_g", "reading on the mass (g)"),
    ("residual_g", "residual (g)"),
    ("tolerance_g", "tolerance (g)"),
    ("passed", "passed"),
    ("next_due", "next calibration due"),
    ("calibration_id", "record id"),
)

SendCommand = Callable[[Command], Awaitable[Reply]]


ZERO_LOAD_WARN_G = 10.0  # more than this on a channel to be zeroed: something is on it


def live_text(channel: str, value_g: float | None, step: str) -> Text:
    """The live line; on the zero step it tells the operator to lift a club that is still on."""
    shown = "-" if value_g is None else f"{value_g:.2f} g"
    text = Text(f"live reading of {channel}: {shown}")
    if step == "step-zero" and value_g is not None and abs(value_g) > ZERO_LOAD_WARN_G:
        text.append(
            "  - a load is on it: lift the club off, keep hands off, wait until it reads"
            " near 0 g, then zero",
            style="bold #ffc24a",
        )
    return text


def reply_lines(title: str, reply: Reply) -> list[str]:
    """Human lines for one step's reply (pure)."""
    lines = [f"{title}: {'accepted' if reply.ok else 'REFUSED'}"
             + (f" - {reply.message}" if reply.message else "")]
    data: dict[str, Any] = reply.data
    for key, name in RESULT_FIELDS:
        if key in data and data[key] is not None:
            value = data[key]
            if isinstance(value, bool):
                value = "YES" if value else "NO"
            elif isinstance(value, float):
                value = f"{value:.6g}"
            lines.append(f"    {name:<26}{value}")
    return lines


def _mass_step(name: str, instructions: str, example: str) -> Vertical:
    """A step that states a mass: instructions, mass / class / id fields, a button."""
    return Vertical(
        Static(instructions),
        Horizontal(
            Input(placeholder=f"mass, e.g. {example}", id=f"{name}-mass"),
            Input(value="M1", placeholder="class", id=f"{name}-class"),
            Input(placeholder="weight id", id=f"{name}-id"),
            classes="cal-fields",
        ),
        Button(f"{name.capitalize()} now", id=f"do-{name}", variant="primary"),
        id=f"step-{name}",
    )


class CalibrationScreen(Screen[None]):
    """The calibration flow for one channel; escape closes it at any step."""

    BINDINGS: ClassVar[list[BindingType]] = [Binding("escape", "close", "Close calibration")]

    readings_g: var[Mapping[str, float | None]] = var(dict, init=False)
    """The latest live value of each channel (the app sets it as readings arrive)."""

    def __init__(
        self,
        channels: list[str],
        send: SendCommand,
        readings_g: Mapping[str, float | None],
        *,
        note: str = "",
    ) -> None:
        super().__init__()
        self.set_reactive(CalibrationScreen.readings_g, readings_g)
        self.note = note
        self.channels = channels
        self.send = send
        self.channel: str | None = None
        self.results: list[str] = []
        self.busy = False

    def compose(self) -> ComposeResult:
        with Vertical(id="cal-body"):
            yield Static("", id="cal-title")
            if self.note:
                yield Static(self.note, id="cal-note")
            yield Static("", id="cal-live")
            with ContentSwitcher(initial="step-pick", id="cal-steps"):
                with Vertical(id="step-pick"):
                    yield Static("Which channel? (enter to choose)")
                    yield OptionList(*(Option(c, id=c) for c in self.channels), id="cal-channels")
                with Vertical(id="step-zero"):
                    yield Static(
                        "Take everything off the supports of this channel and keep hands off.\n"
                        "Then press enter to set the zero."
                    )
                    yield Button("Zero now", id="do-zero", variant="primary")
                yield _mass_step(
                    "span",
                    "Place the reference mass centred on the support, wait until it is still,\n"
                    "state its value, OIML class and id, then press enter. Stay within the\n"
                    "load cell's rated capacity.",
                    "500 g",
                )
                yield _mass_step(
                    "verify",
                    "Replace the reference mass by a check mass (a different value),\n"
                    "wait until it is still, state it, then press enter.",
                    "200 g",
                )
                with Vertical(id="step-result"):
                    yield Static("", id="cal-result")
                    yield Button("Done", id="do-done")
            yield Static("", id="cal-message")
        yield Footer()

    @property
    def step(self) -> str:
        return self.query_one(ContentSwitcher).current or "step-pick"

    def on_mount(self) -> None:
        self._go("step-pick")

    def _go(self, step: str) -> None:
        self.query_one(ContentSwitcher).current = step
        where = f"  [{self.channel}]" if self.channel else ""
        self.query_one("#cal-title", Static).update(Text(STEP_TITLES[step] + where))
        focus = {
            "step-pick": "#cal-channels",
            "step-zero": "#do-zero",
            "step-span": "#span-mass",
            "step-verify": "#verify-mass",
            "step-result": "#do-done",
        }[step]
        self.query_one(focus).focus()
        self.watch_readings_g()

    def watch_readings_g(self) -> None:
        """The chosen channel's current reading (and, on the zero step, whether a load is on it)."""
        if self.channel is None or not self.is_mounted:
            return
        value = self.readings_g.get(self.channel)
        self.query_one("#cal-live", Static).update(live_text(self.channel, value, self.step))

    def _message(self, text: str, error: bool = False) -> None:
        msg = self.query_one("#cal-message", Static)
        msg.update(Text(text))
        msg.set_class(error, "error")

    # -- steps ----------------------------------------------------------------------------

    def on_option_list_option_selected(self, event: OptionList.OptionSelected) -> None:
        self.channel = event.option.id
        self._message("")
        self._go("step-zero")

    def on_button_pressed(self, event: Button.Pressed) -> None:
        self._act(event.button.id or "")

    def on_input_submitted(self, event: Input.Submitted) -> None:
        self._act({"step-span": "do-span", "step-verify": "do-verify"}.get(self.step, ""))

    def _act(self, action: str) -> None:
        if action == "do-done":
            self.dismiss(None)
            return
        if self.busy or self.channel is None:
            return
        channel = self.channel
        cmd: Command
        try:
            if action == "do-zero":
                cmd = CalibrateZero(command="calibrate_zero", channel=channel)
            elif action == "do-span":
                mass_g, klass, wid = self._mass_fields("span")
                cmd = CalibrateSpan(command="calibrate_span", channel=channel, mass_g=mass_g,
                                    weight_class=klass, weight_id=wid)
            elif action == "do-verify":
                mass_g, klass, wid = self._mass_fields("verify")
                cmd = VerifyCheckMass(command="verify", channel=channel, mass_g=mass_g,
                                      weight_class=klass, weight_id=wid)
            else:
                return
        except ValueError as err:
            self._message(str(err), error=True)
            return
        self._run(cmd)

    def _mass_fields(self, prefix: str) -> tuple[float, str, str]:
        text = self.query_one(f"#{prefix}-mass", Input).value
        try:
            mass_g = parse_quantity(text, kind="mass")
        except UnitError as err:
            raise ValueError(f"mass: {err}") from None
        if mass_g <= 0:
            raise ValueError(f"mass: must be more than 0 g, not {text!r}")
        klass = self.query_one(f"#{prefix}-class", Input).value.strip() or "M1"
        wid = self.query_one(f"#{prefix}-id", Input).value.strip()
        return mass_g, klass, wid

    @work(exclusive=True, group="calibration")
    async def _run(self, cmd: Command) -> None:
        self.busy = True
        self._message(f"sending {cmd.command} ...")
        try:
            reply = await self.send(cmd)
        finally:
            self.busy = False
        title = {"calibrate_zero": "zero", "calibrate_span": "span", "verify": "verify"}[
            cmd.command
        ]
        lines = reply_lines(title, reply)
        if not reply.ok:
            self._message("\n".join(lines), error=True)
            return
        self.results += lines
        self._message("\n".join(lines))  # what the service said, until the next step answers
        next_step = {"calibrate_zero": "step-span", "calibrate_span": "step-verify",
                     "verify": "step-result"}[cmd.command]
        if next_step == "step-result":
            self.query_one("#cal-result", Static).update(Text("\n".join(self.results)))
            self._message("")
        self._go(next_step)

    def action_close(self) -> None:
        self.dismiss(None)
