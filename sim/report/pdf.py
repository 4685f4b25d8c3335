"""The report as PDF, from the same HTML, without a browser: WeasyPrint lays the HTML and its inline
SVG out with Pango (CSS paged media: page size, margins, page numbers, ``break-inside: avoid`` keeps
tables and figures whole)."""

from __future__ import annotations

import logging

__all__ = ["pdf_bytes"]


def pdf_bytes(html: str) -> bytes:
    """The PDF of a report's HTML (:func:`sim.report.report_html`).

    Raises
    ------
    RuntimeError
        WeasyPrint or the system's Pango library is missing (``scripts/setup.sh`` installs both).
    """
    try:
        import weasyprint
    except (ImportError, OSError) as err:  # OSError: the Pango shared library is missing
        raise RuntimeError(f"the PDF needs WeasyPrint and Pango ({err}); run scripts/setup.sh") from None
    # WeasyPrint logs every CSS property it does not support as a warning; the report's style sheet
    # is written for it and for browsers, so those are not the user's concern
    logging.getLogger("weasyprint").setLevel(logging.ERROR)
    logging.getLogger("fontTools").setLevel(logging.ERROR)
    return weasyprint.HTML(string=html).write_pdf()
