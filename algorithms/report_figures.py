"""The report's figures: the hydrograph with each event's displacement, and the recession.

Each function returns a matplotlib figure (no display needed); :func:`png_data_uri` turns one
into a compact PNG ``data:`` URI for the self-contained page that :mod:`report` builds.

* :func:`hydrograph_figure`: the whole record small on a log axis, then one or two water
  years (chosen by :func:`chosen_years`: median recharge and the wettest) with each event's
  recession-curve displacement drawn (Rorabaugh 1964): the pre-event recession carried along
  K to the critical time, the post-event recession, Q1 and Q2;
* :func:`recession_figure`: the recession segments behind K, normalised to their start,
  against the fitted K and its 90 % interval.
"""

from __future__ import annotations

import base64
import io
import math

import numpy as np
import pandas as pd

from .annual import water_year_bounds
from .recession import CRITICAL_TIME_FACTOR

#: Resolution of the embedded figures (dots per inch); small keeps the page light.
FIGURE_DPI = 100

# Colours of the event construction (ColorBrewer "Dark2"-like, readable by most colour-blind readers).
FLOW_COLOUR = "#252525"
BASEFLOW_COLOUR = "#6baed6"
PRE_COLOUR = "#d95f02"
POST_COLOUR = "#1b9e77"
CRITICAL_COLOUR = "#7570b3"
ZOOM_SHADE = "#fee391"


# --------------------------------------------------------------------------- public


def chosen_years(annual):
    """Water years to draw in detail: the one with median recharge and the wettest.

    Complete years are preferred; depths (mm) are used when known, else volumes.

    Returns
    -------
    list of (int, str)
        ``(water_year, why)``, one or two items (none when no year has recharge).
    """
    if annual is None or not len(annual):
        return []
    column = "recharge_mm" if np.isfinite(annual["recharge_mm"]).any() else "recharge_m3"
    table = annual[np.isfinite(annual[column].to_numpy(dtype=float))]
    if table["complete"].astype(bool).any():
        table = table[table["complete"].astype(bool)]
    if table.empty:
        return []
    values = table[column].to_numpy(dtype=float)
    years = table["water_year"].to_numpy(dtype=int)
    order = np.argsort(values, kind="stable")
    median = int(years[order[(values.size - 1) // 2]])
    wettest = int(years[order[-1]])
    picks = [(median, "median recharge")]
    if wettest != median:
        picks.append((wettest, "largest recharge"))
    return picks


def hydrograph_figure(gauge_result, years=None, water_year_start=10):
    """The gauge's hydrograph: whole record small, then chosen water years with each event's
    recession-curve displacement drawn (Rorabaugh 1964).

    In each detailed year, for every measured event: the pre-event recession from its anchor
    (the lowest day before the rise) along K to the critical time Tc = 0.2144 K after the peak,
    where it gives Q1; the post-event recession through its anchor, giving Q2 at the same time;
    a dotted line marks the critical time. Events that could not be measured are crossed.

    Parameters
    ----------
    gauge_result : GaugeResult
    years : list of (int, str), optional
        Water years to draw in detail with a reason (default :func:`chosen_years`).
    water_year_start : int
        First month of the water year.

    Returns
    -------
    matplotlib.figure.Figure or None
        None when the gauge has no flow to draw.
    """
    from matplotlib.figure import Figure

    flow = gauge_result.flow
    if flow is None or not np.isfinite(flow.to_numpy(dtype=float)).any():
        return None
    if years is None:
        years = chosen_years(gauge_result.annual)
    heights = [1.3] + [2.5] * len(years)
    figure = Figure(figsize=(11.0, 0.9 + sum(heights)))
    grid = figure.add_gridspec(
        len(heights),
        1,
        height_ratios=heights,
        hspace=0.55,
        top=1 - 0.45 / figure.get_figheight(),
        bottom=0.4 / figure.get_figheight(),
        left=0.06,
        right=0.78,
    )
    overview = figure.add_subplot(grid[0])
    _overview(overview, gauge_result, years, water_year_start)
    for row, (year, why) in enumerate(years, start=1):
        ax = figure.add_subplot(grid[row])
        _year_detail(ax, gauge_result, year, why, water_year_start, legend=row == 1)
    return figure


def recession_figure(gauge_result):
    """The recession segments behind K and the fitted recession.

    Each segment's flow is divided by its fitted value on the segment's first day and drawn
    against days since that day, on a log axis; straight lines falling one log cycle in K days
    mean the segments agree with K. The 90 % interval of K is shaded.

    Returns
    -------
    matplotlib.figure.Figure or None
        None when the gauge has no recession segments.
    """
    from matplotlib.figure import Figure

    recession = gauge_result.recession
    flow = gauge_result.flow
    if recession is None or flow is None or not len(recession.segments):
        return None
    segments = recession.segments
    segments = segments[np.isfinite(segments["slope"].to_numpy(dtype=float))]
    if segments.empty:
        return None
    q = flow.to_numpy(dtype=float)
    figure = Figure(figsize=(6.0, 3.9))
    ax = figure.add_subplot(1, 1, 1)
    xs, ys = [], []
    longest = 0
    for first, last, slope, mean in zip(
        segments["first"].to_numpy(int),
        segments["last"].to_numpy(int),
        segments["slope"].to_numpy(float),
        segments["mean_flow_m3s"].to_numpy(float),
    ):
        days = np.arange(last - first + 1, dtype=float)
        start = math.log10(mean) - slope * (days.size - 1) / 2.0
        with np.errstate(divide="ignore", invalid="ignore"):
            rel = 10.0 ** (np.log10(q[first : last + 1]) - start)
        xs.extend([*days, np.nan])
        ys.extend([*rel, np.nan])
        longest = max(longest, days.size - 1)
    ax.plot(xs, ys, color="#4d4d4d", alpha=0.25, linewidth=0.7, label="segments (one line each)")
    k = recession.days
    span = max(float(longest), 1.1 * k if np.isfinite(k) else 0.0, 10.0)
    t = np.linspace(0.0, span, 100)
    if np.isfinite(k):
        source = "given" if recession.source == "given" else "fitted"
        ax.plot(
            t, 10.0 ** (-t / k), color=PRE_COLOUR, linewidth=2.0, label=f"K {source}: {k:.1f} days"
        )
        if np.isfinite(recession.low) and np.isfinite(recession.high):
            ax.fill_between(
                t,
                10.0 ** (-t / recession.low),
                10.0 ** (-t / recession.high),
                color=PRE_COLOUR,
                alpha=0.25,
                linewidth=0,
                label=f"90% interval {recession.low:.1f}–{recession.high:.1f} days",
            )
        ax.axhline(0.1, color="#999999", linewidth=0.8, linestyle=":")
        ax.annotate(  # under the dotted line at the left, clear of the fitted line
            "one log cycle: the fitted line crosses it at K days",
            (0.0, 0.1),
            xytext=(2, -3),
            textcoords="offset points",
            va="top",
            fontsize=7,
            color="#555555",
        )
    ax.set_yscale("log")
    _plain_log_ticks(ax)
    ax.set_xlim(0, span)
    finite = np.asarray(ys, dtype=float)
    finite = finite[np.isfinite(finite) & (finite > 0)]
    low = min(0.05, float(np.percentile(finite, 1))) if finite.size else 0.05
    ax.set_ylim(max(low, 1e-3), 1.6)
    ax.set_xlabel("days since the segment's first day")
    ax.set_ylabel("flow ÷ fitted flow on first day")
    ax.set_title(f"{len(segments)} recession segments behind K", fontsize=10)
    ax.legend(fontsize=7, loc="lower left", frameon=True)
    ax.grid(True, which="both", color="#eeeeee", linewidth=0.6)
    figure.tight_layout()
    return figure


def png_data_uri(figure, dpi=FIGURE_DPI, tight=True):
    """A matplotlib figure as a compact PNG ``data:`` URI (palette PNG, no metadata).

    ``tight`` trims the white margin (and keeps legends placed outside the axes), at the cost
    of drawing the figure twice.
    """
    from PIL import Image

    buffer = io.BytesIO()
    figure.savefig(
        buffer,
        format="png",
        dpi=dpi,
        facecolor="white",
        bbox_inches="tight" if tight else None,
        pad_inches=0.1,
        metadata={"Software": None},
    )
    buffer.seek(0)
    image = Image.open(buffer).convert("RGB")
    dither = getattr(getattr(Image, "Dither", Image), "NONE", 0)
    palette = image.quantize(colors=256, dither=dither)
    out = io.BytesIO()
    palette.save(out, format="PNG", optimize=True)
    return "data:image/png;base64," + base64.b64encode(out.getvalue()).decode("ascii")


# --------------------------------------------------------------------------- figures (workers)


def _days(index):
    """Matplotlib date numbers of a DatetimeIndex or Timestamps."""
    from matplotlib import dates as mdates

    return mdates.date2num(pd.DatetimeIndex(index).to_pydatetime())


def _date_axis(ax):
    from matplotlib import dates as mdates

    locator = mdates.AutoDateLocator(minticks=4, maxticks=14)
    ax.xaxis.set_major_locator(locator)
    ax.xaxis.set_major_formatter(mdates.ConciseDateFormatter(locator))


def _plain_log_ticks(ax):
    """Ticks such as 0.05, 0.1, 0.2, 0.5, 1 on a log axis (easier to read than powers of ten)."""
    from matplotlib.ticker import FuncFormatter, LogLocator, NullLocator

    ax.yaxis.set_major_locator(LogLocator(base=10, subs=(1.0, 2.0, 5.0), numticks=12))
    ax.yaxis.set_major_formatter(FuncFormatter(_tick_text))
    ax.yaxis.set_minor_locator(NullLocator())


def _decade_ticks(ax):
    """Ticks at each power of ten only, labelled plainly (a hydrograph spans many decades)."""
    from matplotlib.ticker import FuncFormatter, LogLocator, NullLocator

    ax.yaxis.set_major_locator(LogLocator(base=10, numticks=8))
    ax.yaxis.set_major_formatter(FuncFormatter(_tick_text))
    ax.yaxis.set_minor_locator(NullLocator())


def _tick_text(value, _position=None):
    """0.001, 0.05, 2, 500, 1e+04: short labels for log-axis ticks."""
    return f"{value:g}"


def _positive(values):
    v = np.asarray(values, dtype=float)
    return np.where(v > 0, v, np.nan)


def _overview(ax, g, years, start_month):
    flow = g.flow
    x = _days(flow.index)
    ax.plot(x, _positive(flow), color=FLOW_COLOUR, linewidth=0.4, label="daily flow")
    if g.baseflow is not None and np.isfinite(g.baseflow.to_numpy(dtype=float)).any():
        ax.plot(x, _positive(g.baseflow), color=BASEFLOW_COLOUR, linewidth=0.7, label="baseflow")
    for year, _why in years:
        first, last = water_year_bounds(year, start_month)
        lo, hi = _days([first, last + pd.Timedelta(days=1)])
        ax.axvspan(lo, hi, color=ZOOM_SHADE, alpha=0.8, zorder=0, linewidth=0)
        ax.text(
            (lo + hi) / 2,
            1.0,
            str(year),
            transform=ax.get_xaxis_transform(),
            ha="center",
            va="bottom",
            fontsize=7,
        )
    ax.set_yscale("log")
    _decade_ticks(ax)
    ax.set_xlim(x[0], x[-1])
    ax.set_ylabel("m³/s")
    ax.set_title(
        "Whole record, daily flow on a log scale (shaded: the water years drawn below)",
        fontsize=9,
        loc="left",
        pad=10,
    )
    ax.legend(fontsize=7, loc="upper left", bbox_to_anchor=(1.0, 1.0), frameon=False)
    _date_axis(ax)
    ax.tick_params(labelsize=7)


def _year_detail(ax, g, year, why, start_month, legend):
    first, last = water_year_bounds(year, start_month)
    flow = g.flow.loc[first - pd.Timedelta(days=15) : last + pd.Timedelta(days=15)]
    x = _days(flow.index)
    ax.plot(x, _positive(flow), color=FLOW_COLOUR, linewidth=0.9, label="daily flow")
    k = g.recession.days if g.recession is not None else np.nan
    events = g.events
    shown = events.iloc[0:0]
    if len(events) and np.isfinite(k):
        peaks = pd.DatetimeIndex(events["peak_date"])
        shown = events[(peaks >= first) & (peaks <= last)]
    used = shown[shown["used"].astype(bool)] if len(shown) else shown
    skipped = shown[~shown["used"].astype(bool)] if len(shown) else shown
    if len(used):
        _construction(ax, used, events, k)
    if len(skipped):
        peak_q = g.flow.reindex(pd.DatetimeIndex(skipped["peak_date"])).to_numpy(dtype=float)
        ax.plot(
            _days(skipped["peak_date"]),
            _positive(peak_q),
            linestyle="none",
            marker="x",
            color="#cb181d",
            markersize=6,
            label="event not measured",
        )
    ax.set_yscale("log")
    _decade_ticks(ax)
    ax.set_xlim(*_days([first, last + pd.Timedelta(days=1)]))
    ann = g.annual
    row = ann[ann["water_year"] == year] if len(ann) else ann
    value = ""
    if len(row) and not bool(row["complete"].iloc[0]):
        why += ", incomplete year"
    if len(row):
        mm = float(row["recharge_mm"].iloc[0])
        if np.isfinite(mm):
            value = f": {mm:,.0f} mm"
        else:
            value = f": {float(row['recharge_m3'].iloc[0]) / 1e6:,.3g} million m³"
    tc = CRITICAL_TIME_FACTOR * k if np.isfinite(k) else np.nan
    ax.set_title(
        f"Water year {year} ({why}{value}; {len(used)} events measured)"
        + (f"     K = {k:.1f} days, critical time Tc = {tc:.1f} days" if np.isfinite(k) else ""),
        fontsize=9,
        loc="left",
    )
    ax.set_ylabel("m³/s")
    _date_axis(ax)
    ax.tick_params(labelsize=7)
    ax.grid(True, which="major", color="#eeeeee", linewidth=0.6)
    if legend:
        ax.legend(fontsize=7, loc="upper left", bbox_to_anchor=(1.0, 1.0), frameon=False)


def _construction(ax, used, all_events, k):
    """Pre- and post-event recessions, the critical time, Q1 and Q2 of measured events."""
    # A composite event is read after its last peak.
    peak = pd.DatetimeIndex(used["last_peak_date" if "last_peak_date" in used else "peak_date"])
    tc = used["critical_time_days"].to_numpy(dtype=float)
    critical = _days(peak) + tc
    pre_t = _days(used["pre_anchor_date"])
    pre_q = used["pre_anchor_m3s"].to_numpy(dtype=float)
    post_t = _days(used["post_anchor_date"])
    q1 = used["q_before_m3s"].to_numpy(dtype=float)
    q2 = used["q_after_m3s"].to_numpy(dtype=float)
    # The post-event recession runs on to the next event's rise (where the next pre-event
    # recession takes over), or half a critical time past the later of its anchor and Tc.
    starts = np.sort(_days(all_events["rise_start_date"]))
    ends = np.maximum(post_t, critical) + 0.5 * tc
    nxt = starts[np.minimum(np.searchsorted(starts, critical, side="right"), starts.size - 1)]
    ends = np.where((nxt > np.maximum(post_t, critical)) & (nxt < ends), nxt, ends)
    pre_x, pre_y, post_x, post_y = [], [], [], []
    for i in range(len(used)):
        t = np.linspace(pre_t[i], critical[i], 12)
        pre_x.extend([*t, np.nan])
        pre_y.extend([*(pre_q[i] * 10.0 ** (-(t - pre_t[i]) / k)), np.nan])
        lo = min(post_t[i], critical[i])
        t = np.linspace(lo, ends[i], 12)
        post_x.extend([*t, np.nan])
        post_y.extend([*(q2[i] * 10.0 ** (-(t - critical[i]) / k)), np.nan])
    for c in critical:
        ax.axvline(c, color=CRITICAL_COLOUR, linewidth=0.6, linestyle=":", zorder=1)
    ax.plot([], [], color=CRITICAL_COLOUR, linewidth=0.8, linestyle=":", label="critical time")
    ax.plot(pre_x, pre_y, color=PRE_COLOUR, linewidth=1.3, linestyle="--", zorder=2.5,
            label="pre-event recession, carried along K")  # fmt: skip
    # The post-event recession as a broad band under the flow line, which runs along it.
    ax.plot(post_x, post_y, color=POST_COLOUR, linewidth=3.5, alpha=0.5, solid_capstyle="butt",
            zorder=1.5, label="post-event recession")  # fmt: skip
    ax.vlines(critical, q1, q2, color=CRITICAL_COLOUR, linewidth=1.4, zorder=3)
    ax.plot(critical, q1, linestyle="none", marker="o", markersize=4.5, markerfacecolor="white",
            markeredgecolor=PRE_COLOUR, zorder=4, label="Q1 (pre-event, at critical time)")  # fmt: skip
    ax.plot(critical, q2, linestyle="none", marker="o", markersize=4.5, color=POST_COLOUR,
            zorder=4, label="Q2 (post-event, at critical time)")  # fmt: skip
