"""The report as one self-contained HTML page: styles inline, plots as inline SVG, no links out.

Jinja2 autoescapes every value (club ids and job names come from a scanner or an operator);
only the SVG that matplotlib wrote, which escapes its own text, goes in as markup.
"""

from __future__ import annotations

from heft.daemon.report.model import CalibrationEntry, ClubRow, Report
from heft.daemon.report.template import CSS, ROW_MACRO, TEMPLATE


def _record_text(row: ClubRow, stations: int) -> str:
    return f"{row.station} #{row.seq}" if stations > 1 else f"#{row.seq}"


def cal_note(c: CalibrationEntry) -> str:
    """What an auditor should know of one calibration entry, in words."""
    notes: list[str] = []
    if c.source == "config":
        notes.append("given in the station's config file (not a stored record; no due date)")
    elif c.source == "missing":
        notes.append("not in this store (recorded on another station or store?)")
    if c.passed is False:
        notes.append("verification did not pass")
    if c.overdue_when_used:
        notes.append("used after its due date")
    return "; ".join(notes) or "—"


def render_html(report: Report) -> str:
    """The page for ``report``."""
    import jinja2
    from markupsafe import Markup

    from heft.daemon.report.plots import swingweight_svg, weight_svg

    env = jinja2.Environment(
        autoescape=True,
        undefined=jinja2.StrictUndefined,
        trim_blocks=True,
        lstrip_blocks=True,
    )
    stations = len({r.station for r in report.rows})
    env.globals["record_text"] = lambda row: _record_text(row, stations)
    env.globals["cal_note"] = cal_note
    template = env.from_string(ROW_MACRO + TEMPLATE)
    rows = report.rows
    figures = [Markup(swingweight_svg(rows)), Markup(weight_svg(rows))]
    return template.render(
        report=report,
        s=report.summary,
        css=Markup(CSS),
        figures=figures,
    ).lstrip()  # the macros ahead of the page leave blank lines
