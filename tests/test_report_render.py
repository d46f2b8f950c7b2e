"""The rendered report: a real store in, a self-contained HTML page and a PDF out.

The PDF is rendered to bitmaps with pypdfium2 and read back: its text (every club id, verdict,
the uncertainty statement) and its pixels (the plots are drawn where the figures are).
"""

from __future__ import annotations

import re
import xml.etree.ElementTree as ET
from collections.abc import Iterator
from datetime import UTC, datetime
from pathlib import Path
from zoneinfo import ZoneInfo

import numpy as np
import pypdfium2 as pdfium
import pytest

from heft.daemon.measurement import Verdict
from heft.daemon.report.gather import report_from_store
from heft.daemon.report.html import render_html
from heft.daemon.report.model import UNCERTAINTY_STATEMENT, Report
from heft.daemon.report.pdf import write_pdf
from heft.daemon.report.plots import BAND_COLOUR, FIGURE_SIZE_IN, VERDICT_COLOURS
from heft.daemon.storage import Store
from tests.report_records import LARKSPUR_SET, larkspur_store

SCALE = 2.0  # bitmap pixels per PDF point
MM_PT = 72 / 25.4


@pytest.fixture(scope="module")
def report(tmp_path_factory: pytest.TempPathFactory) -> Report:
    db = larkspur_store(tmp_path_factory.mktemp("report") / "heft.db")
    with Store(db) as store:
        made = report_from_store(
            store, tz=ZoneInfo("Europe/London"), tz_name="Europe/London",
            generated_utc=datetime(2026, 12, 1, 9, 30, tzinfo=UTC), generator="0.1.0",
            job="LCW-2611",
        )  # fmt: skip
    assert made is not None
    return made


@pytest.fixture(scope="module")
def html(report: Report) -> str:
    return render_html(report)


@pytest.fixture(scope="module")
def pdf(html: str, tmp_path_factory: pytest.TempPathFactory) -> Iterator[pdfium.PdfDocument]:
    out = tmp_path_factory.mktemp("pdf") / "LCW-2611.pdf"
    write_pdf(html, out)
    doc = pdfium.PdfDocument(out)
    yield doc
    doc.close()


def _text(page: pdfium.PdfPage) -> str:
    """The page's text with line breaks and runs of space as single spaces."""
    return " ".join(page.get_textpage().get_text_range().split())


def _bitmap(page: pdfium.PdfPage) -> np.ndarray:
    return np.asarray(page.render(scale=SCALE).to_pil().convert("RGB")).astype(int)


def _near(rgb: np.ndarray, colour: str, tolerance: int = 6) -> int:
    """How many pixels are within ``tolerance`` of ``colour`` ('#rrggbb') in every channel."""
    target = np.array([int(colour[i : i + 2], 16) for i in (1, 3, 5)])
    return int((np.abs(rgb - target).max(axis=-1) <= tolerance).sum())


# ------------------------------------------------------------------------------- HTML


def test_html_is_one_self_contained_page(html: str) -> None:
    assert html.startswith("<!DOCTYPE html>")
    assert not re.search(r"<(script|link|img|iframe)\b", html)
    assert "@import" not in html
    # The only references are to ids inside the page (matplotlib's markers and clip paths).
    refs = re.findall(r'href="([^"]*)"|url\(([^)]*)\)', html)
    assert refs and all((a or b).startswith("#") for a, b in refs)
    ids = set(re.findall(r'\bid="([^"]+)"', html))
    assert {(a or b)[1:] for a, b in refs} <= ids  # and each names an id that is there
    assert "@page" in html and "A4 landscape" in html  # the print styles travel with it


def test_html_has_units_in_every_column_header(html: str) -> None:
    heads = re.findall(r"<th[^>]*>(.*?)</th>", html, flags=re.S)
    clubs = [h.replace("<br>", " ") for h in heads[:9]]
    assert clubs[2] == "Time (Europe/London)"
    assert clubs[5:8] == ["Total weight (g) ± U", "Balance point (in from butt) ± U",
                          "Swing weight (Lorythmic, points) ± U"]  # fmt: skip
    assert "Reference mass (g, class, id)" in heads and "Due (date)" in heads


def test_html_plots_are_matplotlib_svg_inline(html: str) -> None:
    svgs = re.findall(r"<svg\b.*?</svg>", html, flags=re.S)
    assert len(svgs) == 2
    for svg in svgs:
        root = ET.fromstring(svg)  # well-formed XML, as inline SVG must be
        assert root.tag == "{http://www.w3.org/2000/svg}svg"
        assert "Matplotlib" in svg  # the figure's creator metadata
    ids = re.findall(r'\bid="([^"]+)"', html)
    assert len(ids) == len(set(ids))  # two figures on one page never share an id
    # Figure 1 shows each club's swing weight on the Lorythmic scale, club names on the x axis.
    assert ">D2<" in svgs[0] and "4-iron" in svgs[0] and "Total weight (g)" in svgs[1]


def test_html_escapes_what_operators_and_scanners_typed(tmp_path: Path) -> None:
    from heft.daemon.report.model import build_report
    from tests.report_records import larkspur_record

    m = larkspur_record(1, "7<i>", "<script>x</script>&1", 405.6, 29.18, 406.0)
    made = build_report([m], [], tz=UTC, tz_name="UTC", generated_utc=datetime.now(UTC),
                        generator="0.1.0")  # fmt: skip
    assert made is not None
    page = render_html(made)
    assert "<script>" not in page and "&lt;script&gt;x&lt;/script&gt;&amp;1" in page
    assert "7<i>" not in page and "7&lt;i&gt;" in page  # in the table and in the plot's ticks


def test_html_shows_the_earlier_measurement_of_a_club_measured_again(html: str) -> None:
    body = html[html.index("<h2>Clubs") :]
    eight = body[body.index(">LCW-2611-8I<") - 400 : body.index("<h2>What")]
    assert eight.count("LCW-2611-8I") == 2 and "earlier" in eight
    assert re.search(r"class=\"history\".*?FAIL", eight, flags=re.S)


# -------------------------------------------------------------------------------- PDF


def test_pdf_pages_carry_every_club_verdict_and_the_statement(pdf: pdfium.PdfDocument) -> None:
    # Page 1: header, summary, the table and the statement; page 2: the calibration chain
    # (it does not fit under them at 8.5 pt); page 3: the plots, which always open a page.
    assert len(pdf) == 3
    first, second, plots = (_text(p) for p in pdf)
    for _, club_id, *_ in LARKSPUR_SET:
        assert club_id in first
    assert first.count("PASS") == 6 and "NEAR LIMIT" in first and "FAIL" in first  # earlier 8i
    assert "Total weight (g) ± U" in first and "Time (Europe/London)" in first
    assert "Clubs 7 Pass 6 Near limit (in spec) 1 Fail 0" in first
    assert " ".join(UNCERTAINTY_STATEMENT.split()) in first
    assert "lcw-span-beam0" in second and "500.0 g, class M1, id LCW-REF-500" in second
    assert "Figure 1." in plots and "Figure 2." in plots
    assert "Page 3 of 3" in plots


def _figure_box(page: pdfium.PdfPage, caption: str) -> tuple[int, int, int, int]:
    """Pixel box (left, top, right, bottom) of the figure drawn just above ``caption``."""
    textpage = page.get_textpage()
    found = textpage.search(caption).get_next()
    assert found is not None, f"{caption!r} is not on the page"
    _, _, _, caption_top = textpage.get_charbox(found[0])
    width_pt, height_pt = page.get_size()
    margin_pt = 12 * MM_PT  # the @page margin
    figure_h_pt = (width_pt - 2 * margin_pt) * FIGURE_SIZE_IN[1] / FIGURE_SIZE_IN[0]
    top_pt = caption_top + 0.9 * figure_h_pt  # PDF y grows upwards
    return (
        int(margin_pt * SCALE),
        int((height_pt - top_pt) * SCALE),
        int((width_pt - margin_pt) * SCALE),
        int((height_pt - caption_top - 2) * SCALE),
    )


def test_pdf_plots_are_drawn_where_the_figures_are(pdf: pdfium.PdfDocument) -> None:
    page = pdf[len(pdf) - 1]
    rgb = _bitmap(page)
    for caption in ("Figure 1.", "Figure 2."):
        left, top, right, bottom = _figure_box(page, caption)
        region = rgb[top:bottom, left:right]
        assert region.size, caption
        inked = (region.min(axis=-1) < 200).mean()
        assert inked > 0.01, f"{caption}: the figure is blank ({inked:.3%} inked)"
        # The target bands (light blue fill) and the pass markers (green) are on it.
        assert _near(region, BAND_COLOUR) > 2000, caption
        assert _near(region, VERDICT_COLOURS[Verdict.PASS]) > 50, caption
    # Figure 1 marks the near-limit PW in its own colour.
    left, top, right, bottom = _figure_box(page, "Figure 1.")
    assert _near(rgb[top:bottom, left:right], VERDICT_COLOURS[Verdict.NEAR_LIMIT]) > 20
    # The pixel test can fail: the table page has no band colour on it anywhere.
    assert _near(_bitmap(pdf[0]), BAND_COLOUR) == 0


def test_a_club_without_spec_or_calibration_record_still_reports() -> None:
    from heft.daemon.measurement import Verdict as V
    from heft.daemon.report.model import build_report
    from tests.sample_records import make_measurement

    # A gram scale (calibrated in its own firmware) and no spec selected: nothing to judge.
    m = make_measurement(1, job=None, verdict=V.NO_SPEC).model_copy(
        update={"calibration_ids": [], "checks": []}
    )
    made = build_report([m], [], tz=UTC, tz_name="UTC", generated_utc=datetime.now(UTC),
                        generator="0.1.0")  # fmt: skip
    assert made is not None and made.summary.no_spec == 1
    assert made.title == "Club measurement report" and "Job" not in dict(made.header)
    page = render_html(made)
    assert "NO SPEC" in page and "name no calibration record" in page
    assert 'class="spec"' not in page  # no band to print under the values
