"""Choropleth maps of recharge (matplotlib, no display needed).

Functions here return matplotlib figures; :func:`files.save_figure` writes them.
"""

from __future__ import annotations

import numpy as np

#: Colours for recharge classes, light (little recharge) to dark blue (much).
CLASS_COLOURS = ["#f7fbff", "#c6dbef", "#6baed6", "#2171b5", "#08306b"]
NO_ESTIMATE_COLOUR = "#d9d9d9"


def class_breaks(values, classes=5):
    """Quantile class limits of the finite values (fewer classes when values are few)."""
    v = np.asarray(values, dtype=float)
    v = np.unique(v[np.isfinite(v)])
    if v.size == 0:
        return np.array([])
    if v.size == 1:
        return np.array([v[0], v[0]])
    n = int(min(classes, v.size))
    edges = np.quantile(v, np.linspace(0.0, 1.0, n + 1))
    return np.unique(edges)


def _label(low, high, digits):
    return f"{low:,.{digits}f} – {high:,.{digits}f}"


def recharge_map(catchments, gauges=None, field="recharge_mm_per_year", title=None, units="mm/yr"):
    """A choropleth map of ``field`` over the catchment polygons.

    Larger catchments are drawn first, so nested ones show on top of the basins that contain
    them. Catchments without an estimate are grey and listed in the legend.

    Returns
    -------
    matplotlib.figure.Figure
    """
    from matplotlib.figure import Figure
    from matplotlib.patches import Patch

    values = catchments[field].to_numpy(dtype=float)
    breaks = class_breaks(values)
    digits = 0 if breaks.size and np.nanmax(np.abs(breaks)) >= 100 else 1
    order = np.argsort(-catchments.geometry.area.to_numpy())
    ordered = catchments.iloc[order]
    ordered_values = values[order]
    colours = []
    n_classes = max(breaks.size - 1, 1)
    palette = _palette(n_classes)
    for v in ordered_values:
        if not np.isfinite(v) or breaks.size == 0:
            colours.append(NO_ESTIMATE_COLOUR)
        else:
            idx = int(np.clip(np.searchsorted(breaks, v, side="right") - 1, 0, n_classes - 1))
            colours.append(palette[idx])

    figure = Figure(figsize=(9, 7))
    ax = figure.add_subplot(1, 1, 1)
    ordered.plot(ax=ax, color=colours, edgecolor="#333333", linewidth=0.8)
    if gauges is not None and len(gauges):
        gauges.to_crs(catchments.crs).plot(
            ax=ax, color="#b2182b", marker="^", markersize=40, zorder=5
        )
        id_field = "gauge_id" if "gauge_id" in gauges.columns else None
        if id_field:
            for geom, label in zip(gauges.to_crs(catchments.crs).geometry, gauges[id_field]):
                if geom is not None and not geom.is_empty:
                    ax.annotate(
                        str(label),
                        (geom.x, geom.y),
                        xytext=(4, 4),
                        textcoords="offset points",
                        fontsize=8,
                        zorder=6,
                    )
    handles = []
    if breaks.size >= 2:
        for i in range(n_classes):
            handles.append(
                Patch(
                    facecolor=palette[i],
                    edgecolor="#333333",
                    label=_label(breaks[i], breaks[i + 1], digits),
                )
            )
    if not np.all(np.isfinite(values)):
        handles.append(
            Patch(facecolor=NO_ESTIMATE_COLOUR, edgecolor="#333333", label="no estimate")
        )
    if handles:
        ax.legend(
            handles=handles,
            title=f"Mean annual recharge\n({units})",
            loc="upper left",
            bbox_to_anchor=(1.01, 1.0),
            fontsize=8,
            title_fontsize=9,
            frameon=False,
        )
    ax.set_title(title or f"Mean annual groundwater recharge ({units}), complete water years")
    ax.set_aspect("equal")
    ax.set_xticks([])
    ax.set_yticks([])
    ax.set_xlabel("")
    ax.set_ylabel("")
    crs_name = catchments.crs.name if catchments.crs is not None else "unknown CRS"
    ax.text(
        0.0,
        -0.02,
        f"Recession-curve displacement (Rorabaugh 1964). Red triangles: gauges. CRS: {crs_name}.",
        transform=ax.transAxes,
        va="top",
        fontsize=7,
        color="#555555",
    )
    return figure


def _palette(n):
    if n <= len(CLASS_COLOURS):
        idx = np.round(np.linspace(0, len(CLASS_COLOURS) - 1, n)).astype(int)
        return [CLASS_COLOURS[i] for i in idx]
    from matplotlib import colormaps

    cmap = colormaps["Blues"]
    return [cmap(x) for x in np.linspace(0.05, 0.95, n)]
