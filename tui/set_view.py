"""The set (job) view: swing weight and total weight per club against the spec's bands."""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass

from rich.text import Text
from textual.app import ComposeResult
from textual.containers import Vertical
from textual.reactive import var
from textual.widgets import Static
from textual_plotext import PlotextPlot

from heft.daemon.measurement import Measurement, Verdict
from heft.daemon.physics.swingweight import describe_points
from heft.tui.state import SetData, club_order_key, find_check

BAND_COLOUR = "cyan"
OK_MARKER = "o"
FAIL_MARKER = "X"


def legend_text() -> Text:
    """The plots' legend, one line, off the data: the band's two edges are one target band."""
    text = Text(" ")
    text.append("⠒⠒⠒ ", style=BAND_COLOUR)
    text.append("target band (the spec's limits)   ")
    text.append(f"{OK_MARKER} ", style="green")
    text.append("in spec   ")
    text.append(f"{FAIL_MARKER} ", style="bold red")
    text.append("FAIL")
    return text


@dataclass(frozen=True, slots=True)
class ClubPoint:
    """The latest measurement of one club in the set, on one check's scale."""

    club: str
    value: float
    low: float | None
    high: float | None
    failed: bool


def latest_per_club(measurements: Sequence[Measurement]) -> list[Measurement]:
    """The newest measurement of each club, clubs in set order (a re-measure replaces)."""
    latest: dict[str, Measurement] = {}
    for m in measurements:
        latest[m.club or f"#{m.seq}"] = m
    return [latest[k] for k in sorted(latest, key=club_order_key)]


def points_for(
    measurements: Sequence[Measurement], check: str, *, centred: bool = False
) -> list[ClubPoint]:
    """One point per club; ``centred`` subtracts each club's band centre (value and limits)."""
    out: list[ClubPoint] = []
    for m in latest_per_club(measurements):
        c = find_check(m, check)
        value = m.swingweight_points if check == "swingweight" else m.total_weight_g
        low, high = (c.low, c.high) if c else (None, None)
        if centred and low is not None and high is not None:
            centre = (low + high) / 2
            value, low, high = value - centre, low - centre, high - centre
        out.append(
            ClubPoint(
                club=m.club or f"#{m.seq}",
                value=value,
                low=low,
                high=high,
                failed=c is not None and c.verdict is Verdict.FAIL,
            )
        )
    return out


class BandPlot(PlotextPlot):
    """One check per club: the measured values, failures marked, the band's low and high.

    No plotext legend: it is drawn inside the plot area, over the data. SetView shows one
    legend line above the plots instead (:func:`legend_text`).
    """

    def __init__(
        self, check: str, title: str, *, centred: bool = False, id: str | None = None
    ) -> None:
        super().__init__(id=id)
        self.check = check
        self.title = title
        self.centred = centred

    def show(self, measurements: Sequence[Measurement]) -> None:
        pts = points_for(measurements, self.check, centred=self.centred)
        plt = self.plt
        plt.clear_data()
        plt.clear_figure()
        plt.title(self.title)
        if not pts:
            self.refresh()
            return
        xs = [float(x) for x in range(1, len(pts) + 1)]
        plt.xticks(xs, [p.club for p in pts])
        lows = [p.low for p in pts]
        highs = [p.high for p in pts]
        if all(v is not None for v in lows + highs):
            for limits in (lows, highs):  # the two edges of one target band
                plt.plot(xs, [float(v) for v in limits if v is not None], color=BAND_COLOUR,
                         marker="braille")
        ok = [(x, p.value) for x, p in zip(xs, pts, strict=True) if not p.failed]
        bad = [(x, p.value) for x, p in zip(xs, pts, strict=True) if p.failed]
        if ok:
            plt.scatter([x for x, _ in ok], [v for _, v in ok], color="green", marker=OK_MARKER)
        if bad:
            plt.scatter([x for x, _ in bad], [v for _, v in bad], color="red", marker=FAIL_MARKER)
        values = [p.value for p in pts] + [v for v in lows + highs if v is not None]
        lo, hi = min(values), max(values)
        pad = (hi - lo) * 0.15 or 1.0
        plt.ylim(lo - pad, hi + pad)
        plt.xlim(0.5, len(pts) + 0.5)
        if self.check == "swingweight":
            ticks = _point_ticks(lo - pad, hi + pad)
            plt.yticks(ticks, [describe_points(t) for t in ticks])
        self.refresh()


def _point_ticks(lo: float, hi: float) -> list[float]:
    step = 0.5 if hi - lo <= 4 else 1.0 if hi - lo <= 10 else 5.0
    start = int(lo / step) * step
    ticks: list[float] = []
    t = start
    while t <= hi:
        if t >= lo:
            ticks.append(round(t, 1))
        t += step
    return ticks


class SetView(Vertical):
    """Summary line and the two plots for the current job."""

    data: var[SetData] = var(SetData, init=False)

    def compose(self) -> ComposeResult:
        yield Static("", id="set-summary")
        yield Static(legend_text(), id="set-legend")
        yield BandPlot("swingweight", "swing weight per club (Lorythmic)", id="plot-sw")
        yield BandPlot(
            "total_weight",
            "total weight per club, g from the centre of its own band",
            centred=True,
            id="plot-weight",
        )

    def watch_data(self, data: SetData) -> None:
        job, measurements = data.job, data.measurements
        latest = latest_per_club(measurements)
        fails = [m for m in latest if m.verdict is Verdict.FAIL]
        near = [m for m in latest if m.verdict is Verdict.NEAR_LIMIT]
        specs = sorted({m.spec for m in latest if m.spec})
        summary = (
            f"job {job or '- (none selected: press j)'}   spec {', '.join(specs) or '-'}   "
            f"clubs measured {len(latest)}   FAIL {len(fails)}"
            + (f" ({', '.join(m.club or '?' for m in fails)})" if fails else "")
            + f"   near limit {len(near)}   measurements {len(measurements)}"
        )
        self.query_one("#set-summary", Static).update(Text(summary))
        self.query_one("#plot-sw", BandPlot).show(measurements)
        self.query_one("#plot-weight", BandPlot).show(measurements)
