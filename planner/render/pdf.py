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


class FetchRefused(Exception):
    """Raised by :func:`safe_url_fetcher` for any URL that is not inline data."""


def safe_url_fetcher(url: str, timeout: int = 10, ssl_context=None):
    """Serve inline ``data:`` URLs only; refuse files, HTTP and everything else."""
    if url.startswith("data:"):
        from weasyprint.urls import default_url_fetcher

        return default_url_fetcher(url, timeout=timeout, ssl_context=ssl_context)
    raise FetchRefused(f"axisledger renders offline and does not fetch {url[:80]!r}")


def render_pdf_bytes(record: dict, charts: dict | None = None) -> bytes:
    """The record as PDF bytes, with the JSON record attached."""
    import weasyprint

    logging.getLogger("weasyprint").setLevel(logging.CRITICAL)
    logging.getLogger("fontTools").setLevel(logging.CRITICAL)
    html = render_html(record, charts=charts)
    document = weasyprint.HTML(string=html, base_url=None, url_fetcher=safe_url_fetcher)
    css = weasyprint.CSS(string=stylesheet(), url_fetcher=safe_url_fetcher)
    attachment = weasyprint.Attachment(
        string=dumps(record), name=ATTACHMENT_NAME, description="axisledger decision record (JSON)",
        url_fetcher=safe_url_fetcher,
    )
    return document.write_pdf(stylesheets=[css], attachments=[attachment])
