"""Charts for the PDF: matplotlib figures of Record figures, as inline SVG data URLs.

Charts only draw numbers that the Record holds; they compute nothing new.
"""
from __future__ import annotations

import base64
import io

#: Palette of the record (see report_templates/record.css).
INK = "#1d2731"
GREEN = "#2f5d50"
OCHRE = "#a8781a"
BRICK = "#9b3426"
SLATE = "#4a6378"
#: Beyond this many features a heatmap's labels are unreadable; it is left out.
MAX_HEATMAP_FEATURES = 60


def _pyplot():
    import matplotlib

    matplotlib.use("Agg")
    import matplotlib.pyplot as plt

    plt.rcParams.update(
        {
            "font.family": "DejaVu Sans",
            "font.size": 8,
            "axes.edgecolor": SLATE,
            "axes.labelcolor": INK,
            "xtick.color": INK,
            "ytick.color": INK,
            "svg.fonttype": "path",
            "svg.hashsalt": "axisledger",
        }
    )
    return plt


def svg_data_url(fig) -> str:
    buffer = io.BytesIO()
    fig.savefig(buffer, format="svg", bbox_inches="tight", metadata={"Date": None})
    return "data:image/svg+xml;base64," + base64.b64encode(buffer.getvalue()).decode("ascii")


def correlation_heatmap(columns: list[str], matrix: list[list[float | None]]) -> str | None:
    """Heatmap of the correlation matrix held in the record."""
    if not columns or len(columns) > MAX_HEATMAP_FEATURES:
        return None
    import numpy as np
    from matplotlib.colors import LinearSegmentedColormap

    plt = _pyplot()
    values = np.array([[np.nan if v is None else v for v in row] for row in matrix], dtype=float)
    cmap = LinearSegmentedColormap.from_list("axisledger_diverging", [BRICK, "#f4f1ea", GREEN])
    size = min(7.0, 2.0 + 0.28 * len(columns))
    fig, ax = plt.subplots(figsize=(size + 1.2, size))
    image = ax.imshow(values, cmap=cmap, vmin=-1, vmax=1)
    labels = [c if len(c) <= 28 else c[:27] + "\u2026" for c in columns]
    ax.set_xticks(range(len(columns)), labels, rotation=90)
    ax.set_yticks(range(len(columns)), labels)
    ax.tick_params(length=0)
    for spine in ax.spines.values():
        spine.set_visible(False)
    bar = fig.colorbar(image, ax=ax, fraction=0.046, pad=0.03)
    bar.outline.set_visible(False)
    url = svg_data_url(fig)
    plt.close(fig)
    return url


def charts_for(record: dict) -> dict:
    """All charts the record has figures for, keyed by name."""
    charts: dict[str, str] = {}
    corr = (record.get("diagnostics") or {}).get("correlation")
    if corr:
        url = correlation_heatmap(corr["columns"], corr["matrix"])
        if url:
            charts["correlation"] = url
    return charts
