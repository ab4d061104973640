"""Charts for the PDF: matplotlib figures of Record figures, as inline SVG data URLs."""
from __future__ import annotations

import base64
import io


def svg_data_url(fig) -> str:
    buffer = io.BytesIO()
    fig.savefig(buffer, format="svg", bbox_inches="tight")
    return "data:image/svg+xml;base64," + base64.b64encode(buffer.getvalue()).decode("ascii")


def charts_for(record: dict) -> dict:
    """All charts the record has figures for, keyed by name (later sections add theirs)."""
    return {}
