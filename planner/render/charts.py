"""Charts for the PDF: matplotlib figures of Record figures, as inline SVG data URLs.

Charts only draw numbers that the Record holds; they compute nothing new.
"""
from __future__ import annotations

import base64
import io

from .formatting import plan_name

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
            "svg.fonttype": "none",
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
    dec, comp = record.get("decomposition"), record.get("components")
    if dec and comp:
        rules = comp["rules"]
        pa = rules.get("parallel_analysis", {})
        bs = rules.get("broken_stick", {})
        iv = dec.get("intervals") or {}
        chosen = comp["chosen"]
        charts["scree"] = scree_chart(
            dec["eigenvalues"], pa.get("null_percentile"), pa.get("null_mean"), bs.get("expected_eigenvalue"),
            chosen, iv.get("eigenvalue_low"), iv.get("eigenvalue_high"),
        )
        share = rules.get("cumulative_variance", {}).get("share", 0.8)
        charts["cumulative"] = cumulative_chart(dec["cumulative_ratio"], share, chosen, iv.get("cumulative_low"), iv.get("cumulative_high"))
        disc = record.get("discarded") or {}
        if disc.get("per_feature_retained"):
            bars = retained_bars(disc["per_feature_retained"], disc.get("representation_floor", 0.5))
            if bars:
                charts["retained"] = bars
        if disc.get("row_figures_for_chart"):
            rf = disc["row_figures_for_chart"]
            charts["spe_t2"] = spe_t2_chart(rf["spe"], rf["t2"], disc.get("spe_limit"), disc.get("t2_limit"))
        heat = loadings_heatmap(list(dec["loadings"]), dec["loadings"], min(chosen, dec.get("loadings_components", chosen)))
        if heat:
            charts["loadings"] = heat
        plans = record.get("alternatives") or []
        subset = next((row for row in plans if row["plan_id"] == "feature_subset"), None)
        if subset and subset.get("greedy_path"):
            charts["alternatives"] = alternatives_chart(subset["greedy_path"]["share"], dec["cumulative_ratio"], plans)
    return charts


def alternatives_chart(path_share, cumulative, plans) -> str:
    """Share of the variance kept against the number of inputs: the principal-variables path
    (original features) beside the cumulative share of the components, each plan marked."""
    import numpy as np

    plt = _pyplot()
    fig, ax = plt.subplots(figsize=(6.4, 3.0))
    m = len(path_share)
    q = len(cumulative)
    ax.plot(np.arange(1, m + 1), np.asarray(path_share, float) * 100, "-", color=OCHRE, linewidth=1.4,
            label="original features (principal variables, greedy path)")
    ax.plot(np.arange(1, q + 1), np.asarray(cumulative, float) * 100, "-", color=GREEN, linewidth=1.4, label="components")
    marks = {"components": (GREEN, "o"), "feature_subset": (OCHRE, "s"), "vif_pruning": (SLATE, "D")}
    for row in plans:
        if row.get("variance_retained") is None or not row.get("size"):
            continue
        color, marker = marks[row["plan_id"]]
        ax.plot([row["size"]], [row["variance_retained"] * 100], marker, color=color, markersize=8 if row.get("chosen") else 6,
                markeredgecolor=INK if row.get("chosen") else color,
                label=f"{plan_name(row['plan_id'])} plan" + (" (chosen)" if row.get("chosen") else ""))
    ax.set_ylim(0, 101)
    ax.set_xlim(0, max(m, q) + 1)
    ax.set_xlabel("number of inputs kept (components or original features)")
    ax.set_ylabel("share of the variance kept (%)")
    ax.spines[["top", "right"]].set_visible(False)
    ax.legend(frameon=False, fontsize=7, loc="lower right")
    url = svg_data_url(fig)
    plt.close(fig)
    return url


def scree_chart(eigenvalues, null_percentile, null_mean, broken_stick, chosen, low=None, high=None) -> str:
    """Eigenvalues with the parallel-analysis threshold and the broken-stick curve."""
    import numpy as np

    plt = _pyplot()
    q = min(len(eigenvalues), 40)
    x = np.arange(1, q + 1)
    fig, ax = plt.subplots(figsize=(6.4, 3.2))
    ev = np.asarray(eigenvalues[:q], float)
    def series(values):  # a figure over the components it exists for (p >= n: the non-zero ones)
        y = np.asarray(values[:q], float)
        return x[: len(y)], y

    if low is not None and high is not None:
        xs, lo = series(low)
        ax.fill_between(xs, lo, np.minimum(series(high)[1], ev.max() * 1.5), color=GREEN, alpha=0.12, linewidth=0,
                        label="95% interval")
    ax.plot(x, ev, "-o", color=INK, markersize=3.5, linewidth=1.2, label="eigenvalue")
    ax.plot(x[:chosen], ev[:chosen], "o", color=GREEN, markersize=6, label=f"kept ({chosen})")
    if null_percentile is not None:
        ax.plot(*series(null_percentile), "--", color=OCHRE, linewidth=1.1, label="parallel analysis, 95th percentile")
    if null_mean is not None:
        ax.plot(*series(null_mean), ":", color=OCHRE, linewidth=1.0, label="parallel analysis, mean")
    if broken_stick is not None:
        ax.plot(*series(broken_stick), "-.", color=SLATE, linewidth=1.0, label="broken stick")
    ax.set_xlabel("component")
    ax.set_ylabel("eigenvalue")
    ax.set_xticks(x if q <= 20 else x[::2])
    ax.spines[["top", "right"]].set_visible(False)
    ax.legend(frameon=False, fontsize=7)
    url = svg_data_url(fig)
    plt.close(fig)
    return url


def cumulative_chart(cumulative, share, chosen, low=None, high=None) -> str:
    """Cumulative explained share with the rulebook's share and the chosen k."""
    import numpy as np

    plt = _pyplot()
    q = min(len(cumulative), 40)
    x = np.arange(1, q + 1)
    fig, ax = plt.subplots(figsize=(6.4, 2.6))
    cum = np.asarray(cumulative[:q], float) * 100
    if low is not None and high is not None:
        lo, hi = np.asarray(low[:q], float) * 100, np.asarray(high[:q], float) * 100
        ax.fill_between(x[: len(lo)], lo, hi[: len(lo)], color=GREEN, alpha=0.15, linewidth=0, label="95% interval")
    ax.bar(x, cum, color=[GREEN if i < chosen else "#c8ced3" for i in range(q)], width=0.7)
    ax.axhline(share * 100, color=OCHRE, linestyle="--", linewidth=1.0, label=f"{share:.0%} share")
    ax.set_ylim(0, 100)
    ax.set_xlabel("number of components")
    ax.set_ylabel("cumulative share (%)")
    ax.set_xticks(x if q <= 20 else x[::2])
    ax.spines[["top", "right"]].set_visible(False)
    ax.legend(frameon=False, fontsize=7, loc="lower right")
    url = svg_data_url(fig)
    plt.close(fig)
    return url


def loadings_heatmap(columns, loadings, chosen) -> str | None:
    """Loadings of the kept components, one row a feature."""
    if not columns or len(columns) > MAX_HEATMAP_FEATURES or chosen < 1:
        return None
    import numpy as np
    from matplotlib.colors import LinearSegmentedColormap

    plt = _pyplot()
    values = np.array([[np.nan if v is None else v for v in loadings[c][:chosen]] for c in columns], dtype=float)
    limit = float(np.nanmax(np.abs(values))) or 1.0
    cmap = LinearSegmentedColormap.from_list("axisledger_diverging", [BRICK, "#f4f1ea", GREEN])
    fig, ax = plt.subplots(figsize=(1.6 + 0.55 * chosen, 0.8 + 0.22 * len(columns)))
    image = ax.imshow(values, cmap=cmap, vmin=-limit, vmax=limit, aspect="auto")
    for i in range(values.shape[0]):
        for j in range(values.shape[1]):
            if np.isfinite(values[i, j]):
                ax.text(j, i, f"{values[i, j]:.2f}", ha="center", va="center", fontsize=6, color=INK)
    labels = [c if len(c) <= 28 else c[:27] + "\u2026" for c in columns]
    ax.set_yticks(range(len(columns)), labels)
    ax.set_xticks(range(chosen), [f"PC{j + 1}" for j in range(chosen)])
    ax.xaxis.tick_top()
    ax.tick_params(length=0)
    for spine in ax.spines.values():
        spine.set_visible(False)
    url = svg_data_url(fig)
    plt.close(fig)
    return url


def retained_bars(retained: dict, floor: float) -> str | None:
    """Per-feature share of variance kept, the ones below the floor marked."""
    if not retained or len(retained) > MAX_HEATMAP_FEATURES:
        return None
    plt = _pyplot()
    names = list(retained)
    values = [100 * (retained[c] or 0.0) for c in names]
    fig, ax = plt.subplots(figsize=(6.4, 0.6 + 0.2 * len(names)))
    colors = [BRICK if v < floor * 100 else GREEN for v in values]
    ax.barh(range(len(names)), values, color=colors, height=0.7)
    ax.axvline(floor * 100, color=OCHRE, linestyle="--", linewidth=1.0)
    ax.set_yticks(range(len(names)), [c if len(c) <= 28 else c[:27] + "\u2026" for c in names])
    ax.invert_yaxis()
    ax.set_xlim(0, 100)
    ax.set_xlabel("share of the feature's variance kept (%)")
    ax.spines[["top", "right"]].set_visible(False)
    url = svg_data_url(fig)
    plt.close(fig)
    return url


def spe_t2_chart(spe, t2, spe_limit, t2_limit, labels_worst=None) -> str:
    """SPE against Hotelling's T-squared of every row, with both 95% limits."""
    import numpy as np

    plt = _pyplot()
    spe, t2 = np.asarray(spe, float), np.asarray(t2, float)
    fig, ax = plt.subplots(figsize=(6.4, 3.4))
    over = np.zeros(len(spe), bool)
    if spe_limit is not None:
        over |= spe > spe_limit
    if t2_limit is not None:
        over |= t2 > t2_limit
    ax.scatter(t2[~over], spe[~over], s=8, color=SLATE, alpha=0.6, linewidths=0, label="within both limits")
    ax.scatter(t2[over], spe[over], s=14, color=BRICK, alpha=0.9, linewidths=0, label="beyond a limit")
    if spe_limit is not None:
        ax.axhline(spe_limit, color=OCHRE, linestyle="--", linewidth=1.0, label="95% SPE limit")
    if t2_limit is not None:
        ax.axvline(t2_limit, color=GREEN, linestyle="--", linewidth=1.0, label="95% T\u00b2 limit")
    ax.set_xscale("symlog", linthresh=1.0)
    ax.set_yscale("symlog", linthresh=1.0)
    ax.set_xlim(left=0)
    ax.set_ylim(bottom=0)
    ax.set_xlabel("Hotelling T\u00b2 (kept components)")
    ax.set_ylabel("SPE (discarded part)")
    ax.spines[["top", "right"]].set_visible(False)
    ax.legend(frameon=False, fontsize=7)
    url = svg_data_url(fig)
    plt.close(fig)
    return url
