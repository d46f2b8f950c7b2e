"""The report's figures, drawn with matplotlib and returned as inline SVG text.

Figures are made with :class:`matplotlib.figure.Figure` directly, never through pyplot: no GUI
backend is chosen and no global figure list grows (matplotlib's advice for servers), so a report
can be drawn from any thread of a running service. matplotlib is imported on first use only.

Every mark carries its meaning twice, by colour and by shape, so a page printed in black and
white still tells a fail from a pass.
"""

from __future__ import annotations

import io
import math
import re
from collections.abc import Callable, Mapping, Sequence
from contextlib import AbstractContextManager
from typing import TYPE_CHECKING, Final

from heft.daemon.measurement import Verdict
from heft.daemon.physics.swingweight import describe_points
from heft.daemon.report.model import VERDICT_TEXT, ClubRow
from heft.daemon.report.values import Band, Quantity, points_text

if TYPE_CHECKING:
    from matplotlib.axes import Axes
    from matplotlib.figure import Figure

VERDICT_COLOURS: Final[Mapping[Verdict, str]] = {
    Verdict.PASS: "#1b7a3a",
    Verdict.NEAR_LIMIT: "#b86e00",
    Verdict.FAIL: "#c0262d",
    Verdict.NO_SPEC: "#4d4d4d",
}
VERDICT_MARKERS: Final[Mapping[Verdict, str]] = {
    Verdict.PASS: "o",
    Verdict.NEAR_LIMIT: "D",
    Verdict.FAIL: "X",
    Verdict.NO_SPEC: "s",
}
BAND_COLOUR: Final = "#cfe0f3"  # the target band's fill (tests look for it on the page)
BAND_EDGE: Final = "#7ea6d3"
FIGURE_SIZE_IN: Final = (10.4, 2.55)  # fits the width of an A4 landscape page's text block
_MAX_NAMED_TICKS: Final = 20  # beyond this many clubs the x axis shows numbers only


def _style(salt: str) -> AbstractContextManager[object]:
    """The report's look, for drawing and saving one figure.

    ``svg.hashsalt`` fixes the ids matplotlib gives clip paths and markers: the same report
    draws the same bytes, and two figures on one page never share an id.
    """
    import matplotlib

    return matplotlib.rc_context(
        {
            "font.family": "DejaVu Sans",
            "font.size": 8.5,
            "axes.titlesize": 9.5,
            "axes.edgecolor": "#555555",
            "axes.linewidth": 0.7,
            "svg.fonttype": "none",  # text stays text: searchable, selectable, sharp in the PDF
            "svg.hashsalt": salt,
        }
    )


_ID_REFERENCE: Final = re.compile(r'(\bid="|href="#|url\(#)')


def _svg(fig: Figure, prefix: str) -> str:
    """The figure as an ``<svg>`` element (no XML prolog) for pasting into HTML.

    matplotlib numbers its element ids per figure (``patch_1``, ``line2d_3``...), so two
    figures on one page would share ids: every id, and every reference to one, gets
    ``prefix``.
    """
    out = io.StringIO()
    fig.savefig(out, format="svg", metadata={"Date": None})
    text = out.getvalue()
    return _ID_REFERENCE.sub(lambda m: f"{m.group(1)}{prefix}-", text[text.index("<svg") :])


def _new_figure() -> tuple[Figure, Axes]:
    from matplotlib.figure import Figure

    fig = Figure(figsize=FIGURE_SIZE_IN, layout="constrained")
    ax = fig.add_subplot()
    ax.grid(axis="y", color="#dddddd", linewidth=0.6)
    ax.set_axisbelow(True)
    for side in ("top", "right"):
        ax.spines[side].set_visible(False)
    return fig, ax


def _bands(ax: Axes, rows: Sequence[ClubRow], band_of: Callable[[ClubRow], Band | None]) -> None:
    """Each club's target band as a bar from low to high (open-ended bands are not drawn)."""
    xs, lows, heights = [], [], []
    for r in rows:
        band = band_of(r)
        if band is not None and band.low is not None and band.high is not None:
            xs.append(r.number)
            lows.append(band.low)
            heights.append(band.high - band.low)
    if xs:
        ax.bar(xs, heights, bottom=lows, width=0.72, color=BAND_COLOUR, edgecolor=BAND_EDGE,
               linewidth=0.6, label="target band", zorder=1)  # fmt: skip


def _points(
    ax: Axes, rows: Sequence[ClubRow], value_of: Callable[[ClubRow], Quantity], check: str
) -> None:
    """Each club's value with its ±U error bar, one series per verdict of ``check`` (a club
    that fails on swing weight is not marked a fail on the weight plot if its weight is in)."""
    for verdict in Verdict:
        chosen = [r for r in rows if r.check_verdict(check) is verdict]
        if not chosen:
            continue
        q = [value_of(r) for r in chosen]
        ax.errorbar(
            [r.number for r in chosen],
            [v.value for v in q],
            yerr=[v.u or 0.0 for v in q],
            fmt=VERDICT_MARKERS[verdict],
            color=VERDICT_COLOURS[verdict],
            ecolor=VERDICT_COLOURS[verdict],
            elinewidth=1.1,
            capsize=3,
            markersize=5,
            label=VERDICT_TEXT[verdict].lower(),
            zorder=3,
        )


def _x_axis(ax: Axes, rows: Sequence[ClubRow]) -> None:
    numbers = [r.number for r in rows]
    if len(rows) <= _MAX_NAMED_TICKS:
        ax.set_xticks(numbers, [f"{r.number}\n{r.club or ''}" for r in rows])
    else:
        from matplotlib.ticker import MaxNLocator

        ax.xaxis.set_major_locator(MaxNLocator(nbins=20, integer=True))
    ax.set_xlim(min(numbers) - 0.6, max(numbers) + 0.6)
    ax.set_xlabel("Club, in capture order (No. as in the table)")
    ax.legend(loc="upper left", bbox_to_anchor=(1.0, 1.0), frameon=False, fontsize=8)


def swingweight_svg(rows: Sequence[ClubRow]) -> str:
    """Figure 1: each club's swing weight with its error bar against its target band."""
    from matplotlib.ticker import FuncFormatter, MaxNLocator

    with _style("heft-report-swingweight"):
        fig, ax = _new_figure()
        _bands(ax, rows, lambda r: r.swingweight_band)
        _points(ax, rows, lambda r: r.swingweight_points, "swingweight")
        ax.yaxis.set_major_locator(MaxNLocator(nbins=6, steps=[1, 2, 5, 10]))
        ax.yaxis.set_major_formatter(FuncFormatter(lambda v, _pos: _points_tick(v)))
        ax.set_ylabel("Swing weight (Lorythmic)")
        ax.set_title("Swing weight of each club, ± U (k = 2), against its target band", loc="left")
        _x_axis(ax, rows)
        return _svg(fig, "fig-sw")


def _points_tick(points: float) -> str:
    """A swing-weight tick: 'D2' on whole points, 'D2.5' between them."""
    if not math.isfinite(points):
        return ""
    if abs(points - round(points)) < 1e-9:
        return describe_points(round(points), decimals=0)
    return points_text(points)


def weight_svg(rows: Sequence[ClubRow]) -> str:
    """Figure 2: total weight through the set, in capture order, ± U, with any weight bands."""
    with _style("heft-report-weight"):
        fig, ax = _new_figure()
        ax.plot([r.number for r in rows], [r.weight_g.value for r in rows], color="#9a9a9a",
                linewidth=0.8, zorder=2)  # fmt: skip
        _bands(ax, rows, lambda r: r.weight_band)
        _points(ax, rows, lambda r: r.weight_g, "total_weight")
        ax.set_ylabel("Total weight (g)")
        ax.set_title("Total weight through the set, ± U (k = 2)", loc="left")
        _x_axis(ax, rows)
        return _svg(fig, "fig-weight")
