"""The report as PDF: WeasyPrint lays out the same HTML page with its print styles.

One page, two outputs: what a browser prints and what the PDF shows come from one template and
one stylesheet, so they cannot drift apart. WeasyPrint draws inline SVG itself (the plots stay
vector graphics, their text stays text) and needs Pango from the system; it is imported only
when a PDF is asked for, so the rest of heft never pays for it.
"""

from __future__ import annotations

from pathlib import Path


class PdfError(RuntimeError):
    """The PDF could not be made; the message says why and what to install."""


def write_pdf(html: str, out: Path) -> None:
    """Render ``html`` (a :func:`heft.daemon.report.html.render_html` page) to ``out``."""
    try:
        import weasyprint
    except OSError as err:  # WeasyPrint loads Pango through cffi when it is imported
        raise PdfError(
            "PDF output needs the Pango library (Debian/Ubuntu: apt-get install "
            f"libpango-1.0-0 libpangoft2-1.0-0): {err}"
        ) from err
    weasyprint.HTML(string=html).write_pdf(out)
