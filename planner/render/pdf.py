"""PDF rendering: the HTML of :mod:`planner.render.html` through WeasyPrint.

Rendering fetches nothing from outside: the stylesheet is passed as a string, charts are
inline ``data:`` URLs made by us, and the URL fetcher refuses every other URL, so that a
hostile column name or title can never make the renderer read a file or the network.
The JSON record is embedded in the PDF as an attachment named ``record.json``.
"""
from __future__ import annotations

import logging

from ..record import dumps
from .html import render_html, stylesheet

ATTACHMENT_NAME = "record.json"
#: PDF/A-3b allows embedded files, so the archived PDF carries its JSON record.
PDF_VARIANT = "pdf/a-3b"


class FetchRefused(ValueError):
    """Raised by the fetcher for any URL that is not inline data."""


def _offline_fetcher():
    """A WeasyPrint URL fetcher that serves inline ``data:`` URLs and refuses the rest."""
    from weasyprint.urls import URLFetcher

    class OfflineFetcher(URLFetcher):
        def __init__(self):
            super().__init__(allowed_protocols=("data",), allow_redirects=False, fail_on_errors=False)

        def fetch(self, url, headers=None):
            if not url.startswith("data:"):
                raise FetchRefused(f"axisledger renders offline and does not fetch {url[:80]!r}")
            return super().fetch(url, headers)

    return OfflineFetcher()


def render_pdf_bytes(record: dict, charts: dict | None = None) -> bytes:
    """The record as PDF bytes, with the JSON record attached."""
    import weasyprint

    logging.getLogger("weasyprint").setLevel(logging.CRITICAL)
    logging.getLogger("fontTools").setLevel(logging.CRITICAL)
    fetcher = _offline_fetcher()
    html = render_html(record, charts=charts)
    document = weasyprint.HTML(string=html, base_url=None, url_fetcher=fetcher)
    css = weasyprint.CSS(string=stylesheet(), url_fetcher=fetcher)
    attachment = weasyprint.Attachment(
        string=dumps(record), name=ATTACHMENT_NAME, description="axisledger decision record (JSON)",
        url_fetcher=fetcher,
    )
    try:
        return document.write_pdf(stylesheets=[css], attachments=[attachment], pdf_variant=PDF_VARIANT)
    except (ValueError, TypeError, KeyError):  # a WeasyPrint without the variant: plain PDF
        return document.write_pdf(stylesheets=[css], attachments=[attachment])
