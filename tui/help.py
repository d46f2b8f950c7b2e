"""The help screen: what each area shows and every key."""

from __future__ import annotations

from typing import ClassVar

from textual.app import ComposeResult
from textual.binding import Binding, BindingType
from textual.containers import VerticalScroll
from textual.screen import ModalScreen
from textual.widgets import Footer, Markdown

HELP_TEXT = """\
# heft dashboard

The dashboard watches a weighing station. It never drives the hardware itself: it shows the
service's events and sends commands the service may accept or refuse.

## Live
- **Verdict banner**: PASS, NEAR LIMIT (inside the spec but close to a limit), FAIL (with the
  check that failed and by how much) or NO SPEC. The word is always written out; colour only
  repeats it.
- **Alarm banner**: appears while an alarm is active and not yet acknowledged. Press **a** to
  acknowledge the newest one, or open the Alarms tab to pick one.
- **Swing weight** on the 14-inch Lorythmic scale: the letter in a box, the number in large
  digits, with its points and expanded uncertainty (k = 2). Below: total weight, balance point
  from the butt, moment about 14 in.
- **Capture**: EMPTY (ready), SETTLING (hands off; the load on the beam now), CAPTURED,
  HOLDING (lift the club to re-arm), WILL NOT SETTLE, OFFLINE.
- **Gauges**: where the last club sits in each band of the spec; the marker line says INSIDE,
  NEAR LIMIT, ABOVE or BELOW.
- **Channels**: each support's live value with a flag word (stable, motion, OVERLOAD...) and a
  sparkline of the last three seconds.

## Set
Swing weight and total weight of the latest measurement of each club in the current job,
against the target band (two lines: the spec's low and high limits); failures are drawn as X.

## Devices
Connected or not, port, sample rate, frame errors, last reading (grams, or raw counts when no
calibrated channel reports), model and firmware.

## Alarms
History, newest first. ACTIVE alarms are shown on red; **a** acknowledges the selected one.

## Calibration (c)
For a load-cell channel: zero with the supports empty, span with a stated reference mass, verify
with a check mass, then the result and the next due date. Respect each load cell's rated
capacity and fix the beam so it cannot fall.

## Keys
| key | does |
|-----|------|
| 1 2 3 4 | Live, Set, Devices, Alarms |
| a | acknowledge an alarm |
| j | select the job |
| c | calibrate a load-cell channel |
| r | re-arm the capture cycle |
| t | tare |
| s | choose the station (when several publish) |
| b | terminal bell on FAIL and new alarms, on or off |
| ? | this help |
| q | quit (the demo also stops its simulated bench) |

A dashboard started with `heft dash` is read-only unless it was started with `--commands`; a
command key then says so instead of acting. The header shows the link to the broker:
connecting, connected, or cannot reach host:port with the time to the next try.
"""


class HelpScreen(ModalScreen[None]):
    BINDINGS: ClassVar[list[BindingType]] = [
        Binding("escape", "close", "Close"),
        Binding("question_mark", "close", "Close", show=False),
        Binding("q", "close", "Close", show=False),
    ]

    def compose(self) -> ComposeResult:
        with VerticalScroll(id="help-body"):
            yield Markdown(HELP_TEXT)
        yield Footer()

    def action_close(self) -> None:
        self.dismiss(None)
