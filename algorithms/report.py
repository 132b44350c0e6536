"""One self-contained HTML page per run: the map, the cautions, and every gauge's evidence.

The page has no external references: the style sheet is inline and the figures are PNG images
embedded as ``data:`` URIs, so it can be mailed, archived or opened offline. It opens with the
map, the method's cautions and a summary of the run; then one section per gauge with

* the hydrograph on a log axis: the whole record small, and one or two water years (the one
  with median recharge and the wettest) with each event's displacement drawn: the pre-event
  recession carried along K to the critical time, the post-event recession, Q1 and Q2;
* the recession segments behind K, normalised to their start, against the fitted K, and the
  recession index by flow level (master recession curve);
* the annual table and the quality flags in words.

:func:`report_html` returns the page as text; :func:`write_report` writes it atomically. The
figures themselves are drawn by :mod:`report_figures` (their names stay importable from here).
"""

from __future__ import annotations

import dataclasses
import datetime as _dt
import html
import math
from pathlib import Path

import numpy as np
import pandas as pd

from . import files
from .errors import Cancelled, InputError
from .maps import SCHEMES, recharge_map, year_maps
from .recession import CRITICAL_TIME_FACTOR
from .report_figures import (  # noqa: F401  (the figures' names stay importable from here)
    BASEFLOW_COLOUR,
    CRITICAL_COLOUR,
    FIGURE_DPI,
    FLOW_COLOUR,
    POST_COLOUR,
    PRE_COLOUR,
    ZOOM_SHADE,
    chosen_years,
    hydrograph_figure,
    png_data_uri,
    recession_figure,
)
from .trend_map import trend_map
from .trends import MIN_YEARS

#: The method's cautions, shown near the top of every report: (heading, text).
CAUTIONS = (
    (
        "Assumptions",
        "The recession-curve displacement method assumes a homogeneous aquifer, recharge spread "
        "evenly in space and quick in time, and a stream with no regulation, diversions, pumping "
        "or return flows. It is commonly applied to perennial, baseflow-dominated streams "
        "draining roughly 3–1,300 km² (common practice, not a published limit).",
    ),
    (
        "Biases",
        "Frequent peaks, bank storage, riparian evapotranspiration and heterogeneous aquifers "
        "bias the result (Halford & Mayer 2000).",
    ),
    (
        "What the numbers are",
        "Recharge that returns to the stream above the gauge, not regional underflow that leaves "
        "the basin beneath it.",
    ),
    (
        "Their use",
        "These are estimates with stated uncertainty, not measurements. Decisions about water "
        "allocation rest with qualified hydrogeologists and the local rules.",
    ),
)

#: Default page title.
TITLE = "Groundwater recharge by recession-curve displacement"


# --------------------------------------------------------------------------- public


def report_html(
    result,
    gauges=None,
    title=TITLE,
    max_gauges=60,
    scheme="quantiles",
    classes=5,
    settings=None,
    water_year_start=None,
    include_year_maps=True,
    reporter=None,
    provenance=None,
):
    """The run's report as one self-contained HTML page.

    Parameters
    ----------
    result : AtlasResult
        What :func:`pipeline.run_atlas` returned.
    gauges : geopandas.GeoDataFrame, optional
        The gauge points, for the map and the gauge names (a ``name`` field is shown).
    title : str
        Page title.
    max_gauges : int
        Gauges drawn in full, in the run's order; the others are listed with their numbers
        and a note, so the page stays a sane size.
    scheme, classes
        Map classes (see :func:`maps.class_breaks`).
    settings : Settings, optional
        The run's settings, listed in the summary (default: ``result.settings`` if present).
    water_year_start : int, optional
        First month of the water year (default: from the settings, else 10).
    include_year_maps : bool
        Add the small-multiple map of recharge by water year.
    reporter : pipeline.Reporter, optional
        Told ``progress(done, total, gauge_id)`` before each gauge and asked ``cancelled()``;
        a cancel raises :class:`errors.Cancelled` (drawing takes about a second per gauge).
    provenance : provenance.Provenance, optional
        Where the run came from (version, inputs with their SHA-256, every setting in the
        names a user types), shown in the summary in place of ``settings``.

    Returns
    -------
    str
        The HTML page (UTF-8 text, no external references).
    """
    if scheme not in SCHEMES:
        raise InputError(f"map classes were {scheme!r}; expected one of {list(SCHEMES)}")
    try:
        max_gauges = int(max_gauges)
    except (TypeError, ValueError):
        max_gauges = -1
    if max_gauges < 0:
        raise InputError(f"max gauges was {max_gauges!r}; expected a whole number, 0 or more")
    if settings is None:
        settings = getattr(result, "settings", None)
    if water_year_start is None:
        water_year_start = getattr(settings, "water_year_start", None) or 10

    catchments = result.catchments
    names = _gauge_names(gauges, catchments)
    quality = _catchment_quality(catchments)
    gauge_ids = list(result.gauges)
    drawn, left_out = gauge_ids[:max_gauges], gauge_ids[max_gauges:]
    anchors = {gid: f"gauge-{i + 1}" for i, gid in enumerate(drawn)}

    parts = [_head(title)]
    parts.append(f"<h1>{_e(title)}</h1>")
    if provenance is not None:
        made = provenance.footer().replace(" · ", " on ", 1)
    else:
        made = "Recharge Atlas on " + _dt.datetime.now().strftime("%Y-%m-%d %H:%M")
    parts.append(f'<p class="lead">{_e(_summary_sentence(result))} Made with {_e(made)}.</p>')
    parts.append(_cautions_html())
    parts.append(_maps_html(result, gauges, scheme, classes, include_year_maps))
    parts.append(_summary_html(result, names, quality, anchors, settings, provenance))
    parts.append(_contents_html(drawn, names, quality, anchors, result))
    for done, gid in enumerate(drawn):
        if reporter is not None:
            if reporter.cancelled():
                raise Cancelled("report cancelled")
            reporter.progress(done, len(drawn), gid)
        parts.append(
            _gauge_html(
                gid,
                result.gauges[gid],
                names.get(gid),
                quality.get(gid),
                anchors[gid],
                water_year_start,
                catchments,
            )
        )
    if left_out:
        parts.append(_left_out_html(left_out, result, names, quality, max_gauges))
    parts.append(_method_html())
    parts.append("</main></body></html>\n")
    if reporter is not None:
        reporter.progress(len(drawn), len(drawn), None)
    return "\n".join(parts)


def write_report(result, path, **kw):
    """Write :func:`report_html` to ``path`` (``.html``), atomically; return the path.

    The output folder is checked first; the page is built completely before it is written
    beside the target and moved into place, so a failure leaves no file.
    """
    path = Path(path)
    if path.suffix.lower() not in (".html", ".htm"):
        raise InputError("the report must be an HTML file ending in .html", file=str(path))
    with files.atomic_path(path) as temp:
        text = report_html(result, **kw)
        temp.write_text(text, encoding="utf-8")
    return path


# --------------------------------------------------------------------------- HTML (workers)

_CSS = """
body{font-family:"DejaVu Sans","Segoe UI",Helvetica,Arial,sans-serif;color:#1a1a1a;margin:0;
background:#f4f4f2;font-size:15px;line-height:1.45}
*{box-sizing:border-box}
main{max-width:1180px;margin:0 auto;padding:18px 28px 40px;background:#fff}
h1{font-size:26px;margin:8px 0 4px}
h2{font-size:21px;margin:34px 0 8px;padding-top:10px;border-top:3px solid #08519c}
h3{font-size:16px;margin:20px 0 6px}
p.lead{color:#444;margin:0 0 12px}
.cautions{background:#fff8e1;border:1px solid #e0b000;border-left:6px solid #e0b000;
padding:8px 16px;margin:12px 0 16px}
.cautions h2{border:0;margin:4px 0;padding:0;font-size:17px}
.cautions ul{margin:4px 0 6px;padding-left:20px}
.cautions li{margin:3px 0}
figure{margin:10px 0}
figure img{max-width:100%;height:auto;border:1px solid #e5e5e5}
figcaption{font-size:13px;color:#555}
table{border-collapse:collapse;font-size:13px;margin:6px 0 12px}
th,td{padding:3px 7px;border-bottom:1px solid #e3e3e3;text-align:right;white-space:nowrap}
th{background:#eef3f8;text-align:center;vertical-align:bottom}
td.text,th.text{text-align:left;white-space:normal}
td.name{text-align:left}
tr.incomplete td{color:#777;font-style:italic}
tr.mean td{font-weight:bold;border-top:2px solid #999}
.ok{display:inline-block;background:#e5f5e0;color:#1b5e20;border:1px solid #a1d99b;
padding:1px 8px;border-radius:3px}
.flags{background:#fdecea;border:1px solid #d9534f;border-left:6px solid #d9534f;
padding:6px 14px;margin:8px 0}
.flags strong{color:#a12622}
.flags ul{margin:4px 0;padding-left:20px}
.badge{display:inline-block;padding:0 6px;border-radius:3px;font-size:12px}
.badge.ok{background:#e5f5e0;color:#1b5e20}
.badge.flag{background:#fdecea;color:#a12622;border:1px solid #d9534f}
.facts{display:flex;flex-wrap:wrap;gap:6px 22px;margin:6px 0 4px;font-size:14px}
.facts div span{color:#666}
.row{display:flex;flex-wrap:wrap;gap:18px;align-items:flex-start}
nav ol{columns:3;font-size:14px}
.note{color:#555;font-size:13px}
.caution{background:#fff8e1;border-left:6px solid #e0b000;padding:6px 10px}
a{color:#08519c}
.wide{overflow-x:auto;max-width:100%}
caption{font-size:13px;text-align:left;color:#444}
"""


def _head(title):
    return (
        '<!DOCTYPE html>\n<html lang="en"><head><meta charset="utf-8">'
        '<meta name="viewport" content="width=device-width, initial-scale=1">'
        f"<title>{_e(title)}</title><style>{_CSS}</style></head><body><main>"
    )


def _e(text):
    return html.escape(str(text), quote=True)


def _fmt(value, digits=0, dash="–"):
    try:
        v = float(value)
    except (TypeError, ValueError):
        return dash
    if not math.isfinite(v):
        return dash
    text = f"{v:,.{digits}f}"
    if text.startswith("-") and float(text.replace(",", "")) == 0:
        text = text[1:]  # no "-0"
    return text


def _sig(value, figures=3):
    """A number to a few significant figures, without an exponent for everyday sizes."""
    try:
        v = float(value)
    except (TypeError, ValueError):
        return "–"
    if not math.isfinite(v):
        return "–"
    if v == 0:
        return "0"
    digits = max(0, figures - 1 - int(math.floor(math.log10(abs(v)))))
    return _fmt(round(v, digits), digits)


def _range(value, low, high, digits=0, always=False):
    """``" (low–high)"`` after a value, or nothing when all three round alike (with
    ``always``, the interval is shown with up to two more digits until its ends differ). The
    low end is rounded down and the high end up, so the range shown always holds the value
    shown."""
    try:
        numbers = [float(v) for v in (value, low, high)]
    except (TypeError, ValueError):
        return ""
    if not all(math.isfinite(v) for v in numbers):
        return ""
    for extra in range(3 if always else 1):
        low_text, high_text = _ends(numbers[1], numbers[2], digits + extra)
        if low_text != high_text:
            return f" ({low_text}–{high_text})"
    return " (interval under 0.01 wide)" if always else ""


def _ends(low, high, digits=0):
    """The two ends of a range as text, the low one rounded down and the high one up."""
    try:
        low, high = float(low), float(high)
    except (TypeError, ValueError):
        return "–", "–"
    scale = 10.0**digits
    down = math.floor(low * scale) / scale if math.isfinite(low) else low
    up = math.ceil(high * scale) / scale if math.isfinite(high) else high
    return _fmt(down, digits), _fmt(up, digits)


def _img(figure, alt, caption=None, width=None, tight=True):
    uri = png_data_uri(figure, tight=tight)
    style = f' style="width:{width}px"' if width else ""
    cap = f"<figcaption>{_e(caption)}</figcaption>" if caption else ""
    return f'<figure><img src="{uri}" alt="{_e(alt)}"{style}>{cap}</figure>'


def _gauge_names(gauges, catchments):
    names = {}
    for layer in (catchments, gauges):
        if layer is None or "gauge_id" not in getattr(layer, "columns", ()):
            continue
        column = next((c for c in layer.columns if str(c).lower() == "name"), None)
        if column is None:
            continue
        for gid, name in zip(layer["gauge_id"], layer[column]):
            if gid is not None and isinstance(name, str) and name.strip():
                names[str(gid)] = name.strip()
    return names


def _catchment_quality(catchments):
    out = {}
    if "gauge_id" in catchments.columns and "quality" in catchments.columns:
        for gid, text in zip(catchments["gauge_id"], catchments["quality"]):
            if isinstance(gid, str) and isinstance(text, str) and gid not in out:
                out[gid] = text
    return out


def _flags(gid, g, quality):
    text = quality.get(gid)
    if text is None:
        text = g.quality_text
    if text.strip() == "ok":
        return []
    return [t.strip() for t in text.split("; ") if t.strip()]


def _summary_sentence(result):
    s = result.summary
    text = (
        f"{s.get('gauges', len(result.gauges))} gauges: {s.get('computed', 0)} computed, "
        f"{s.get('flagged', 0)} flagged, {s.get('failed', 0)} failed."
    )
    if "catchments" in s:
        text += f" {s['catchments']} catchments"
        if s.get("catchments_without_gauge"):
            text += f", {s['catchments_without_gauge']} without a gauge"
        text += "."
    if "linked" in s and "subbasins" not in s:
        how = {"id": "by their id field", "spatial": "spatially (gauge at the outlet)"}
        text += (
            f" {s['linked']} of {s.get('gauges', len(result.gauges))} gauges linked to a "
            f"catchment {how.get(s.get('link'), '')}".rstrip()
            + "."
        )
    if "subbasins" in s:
        text += f" {s['subbasins']} subbasins"
        if s.get("subbasins_without_estimate"):
            text += f", {s['subbasins_without_estimate']} without an estimate"
        text += "."
    return text


def _cautions_html():
    items = "".join(f"<li><b>{_e(h)}.</b> {_e(t)}</li>" for h, t in CAUTIONS)
    return (
        '<section class="cautions" id="cautions"><h2>Read this first: what the method assumes</h2>'
        f"<ul>{items}</ul></section>"
    )


def _maps_html(result, gauges, scheme, classes, include_year_maps):
    catchments = result.catchments
    out = ['<section id="maps">']
    if not len(catchments):
        out.append('<p class="note">The run has no catchments to map.</p></section>')
        return "\n".join(out)
    if "recharge_mm_per_year" in catchments.columns:
        out.append(
            _img(
                recharge_map(catchments, gauges, scheme=scheme, classes=classes),
                "Map of mean annual recharge by catchment",
                "Mean annual recharge over every water year with a complete discharge record. "
                "Where basins nest, each area is coloured by the recharge of the area between "
                "gauges (thick outlines: basins that contain other gauged basins); grey: no "
                "estimate, with the reason (no gauge, flagged: see the quality flags).",
                width=900,
            )
        )
    field = "incremental_recharge_mm_per_year"
    if (
        field in catchments.columns
        and np.isfinite(pd.to_numeric(catchments[field], errors="coerce")).any()
    ):
        out.append(
            _img(
                recharge_map(catchments, gauges, scheme=scheme, classes=classes, nested="outline"),
                "Map of mean annual recharge of whole basins",
                "Recharge of each whole basin upstream of its gauge; basins that contain other "
                "gauged basins are drawn as outlines only, their value written beside the gauge.",
                width=900,
            )
        )
    field = "recharge_trend_mm_per_decade"
    if (
        field in catchments.columns
        and np.isfinite(pd.to_numeric(catchments[field], errors="coerce")).any()
    ):
        out.append(
            _img(
                trend_map(catchments, gauges),
                "Map of the trend of annual recharge by catchment",
                f"Trend of each whole basin's annual recharge over its complete water years "
                f"(at least {MIN_YEARS}): Sen's slope in mm/yr per decade, brown falling and "
                "blue-green rising; hatched where the Mann–Kendall test (serial correlation "
                "allowed for) finds no clear trend at the 5 % level. A trend over the record "
                "says what happened, not what will.",
                width=900,
            )
        )
    subbasins = getattr(result, "subbasins", None)
    if subbasins is not None and "recharge_mm_per_year" in getattr(subbasins, "columns", ()):
        out.append(
            _img(
                recharge_map(
                    subbasins,
                    gauges,
                    scheme=scheme,
                    classes=classes,
                    title="Mean annual recharge by subbasin (mm/yr)",
                ),
                "Map of mean annual recharge by subbasin",
                "Each subbasin takes the recharge of the area between its gauge downstream and "
                "the gauges upstream of that; the field estimate_source says where a value was "
                "borrowed from another gauge.",
                width=900,
            )
        )
    annual = result.annual
    if include_year_maps and len(annual) and "water_year" in annual.columns:
        try:
            figure = year_maps(catchments, annual, gauges, scheme=scheme, classes=classes)
        except InputError:
            figure = None
        if figure is not None:
            out.append(
                _img(
                    figure,
                    "Maps of recharge by water year",
                    "Recharge of each water year (named by the year in which it ends), with one "
                    "set of classes for all years; hatched: incomplete year.",
                )
            )
    out.append("</section>")
    return "\n".join(out)


def _summary_html(result, names, quality, anchors, settings, provenance=None):
    rows = []
    for gid, g in result.gauges.items():
        k = g.recession
        flags = _flags(gid, g, quality)
        link = f'<a href="#{anchors[gid]}">{_e(gid)}</a>' if gid in anchors else _e(gid)
        k_text = "–"
        if k is not None and np.isfinite(k.days):
            k_text = _fmt(k.days, 1) + _range(k.days, k.low, k.high, 1, always=True)
            if k.source == "given":
                k_text += " (given)"
        r_text = _fmt(g.recharge_mm_per_year) + _range(
            g.recharge_mm_per_year, g.recharge_mm_per_year_low, g.recharge_mm_per_year_high
        )
        used = int(g.events["used"].sum()) if len(g.events) else 0
        status = (
            '<span class="badge ok">ok</span>'
            if not flags
            else f'<span class="badge flag">{len(flags)} flag{"s" if len(flags) > 1 else ""}</span>'
        )
        rows.append(
            "<tr>"
            f'<td class="text">{link}</td><td class="name">{_e(names.get(gid, ""))}</td>'
            f"<td>{_fmt(g.area_km2, 1)}</td><td>{k_text}</td><td>{r_text}</td>"
            f"<td>{_fmt(g.baseflow_index, 2)}</td><td>{g.complete_years}</td><td>{used}</td>"
            f'<td class="text">{status}</td></tr>'
        )
    table = (
        "<table><thead><tr>"
        '<th class="text">Gauge</th><th class="text">Name</th><th>Drainage area<br>km²</th>'
        "<th>Recession index K<br>days (90% interval)</th>"
        "<th>Mean annual recharge<br>mm/yr, years with a complete record<br>(90% band)"
        "</th><th>Baseflow<br>index</th>"
        '<th>Complete<br>water years</th><th>Events<br>measured</th><th class="text">Quality</th>'
        "</tr></thead><tbody>" + "".join(rows) + "</tbody></table>"
    )
    out = ['<section id="summary"><h2>Summary</h2>']
    line = (result.summary or {}).get("plausibility", "")
    if line:  # most gauges fail the same check: a fault of the whole input, said first
        out.append(f'<p class="caution"><b>Check the input:</b> {_e(line)}.</p>')
    out.append(table)
    without = _catchments_without_gauge(result.catchments)
    if without:
        shown = ", ".join(_e(n) for n in without[:30]) + (" …" if len(without) > 30 else "")
        out.append(f'<p class="note">Catchments without a gauge (no estimate): {shown}.</p>')
    if provenance is not None:
        out.append(_provenance_html(provenance))
    elif settings is not None:
        out.append(_settings_html(settings))
    out.append(
        '<p class="note">All numbers are in the run\'s GeoPackage: layer <code>catchments</code>, '
        "tables <code>annual</code>, <code>events</code>, <code>segments</code> and "
        "<code>master_recession</code>.</p></section>"
    )
    return "\n".join(out)


def _catchments_without_gauge(catchments):
    if "quality" not in catchments.columns:
        return []
    column = next((c for c in catchments.columns if str(c).lower() == "name"), None)
    out = []
    for i, text in enumerate(catchments["quality"]):
        if isinstance(text, str) and (
            "no gauge linked to this catchment" in text or "is not in the gauges layer" in text
        ):
            out.append(str(catchments[column].iloc[i]) if column else f"row {i + 1}")
    return out


def _provenance_html(provenance):
    """How the run was made: version and time, the inputs with their size and SHA-256, every
    setting in the names a user types, and the libraries that computed it."""

    def rows(pairs):
        return "".join(
            f'<tr><td class="text">{_e(k)}</td><td class="text">{v}</td></tr>' for k, v in pairs
        )

    inputs = rows(
        (name, f"{_e(path)}<br><small>{'' if size is None else f'{size:,} bytes · '}"
         f"SHA-256 {_e(sha) if sha else '–'}</small>")
        for name, path, size, sha in provenance.input_facts()
    )  # fmt: skip
    settings = rows((name, _e(_plain(value))) for name, value in provenance.settings)
    libraries = ", ".join(f"{_e(k)} {_e(v)}" for k, v in provenance.libraries.items())
    return (
        "<details><summary>How this run was made: version, inputs and settings</summary>"
        f"<p>Recharge Atlas {_e(provenance.version)}, {_e(provenance.interface)}, started "
        f"{_e(provenance.created)}. The same is in the GeoPackage's <code>run</code> table.</p>"
        f'<table><thead><tr><th class="text">Input</th><th class="text">File</th></tr>'
        f"</thead><tbody>{inputs}</tbody></table>"
        f'<table><thead><tr><th class="text">Setting</th><th class="text">Value</th></tr>'
        f"</thead><tbody>{settings}</tbody></table>"
        f'<p class="note">Libraries: {libraries}.</p></details>'
    )


def _plain(value):
    if value is None:
        return "–"
    if isinstance(value, bool):
        return "yes" if value else "no"
    return str(value)


def _settings_html(settings):
    if dataclasses.is_dataclass(settings):
        items = dataclasses.asdict(settings)
    elif isinstance(settings, dict):
        items = dict(settings)
    else:
        return ""
    cells = "".join(
        f'<tr><td class="text">{_e(str(k).replace("_", " "))}</td>'
        f'<td class="text">{_e("–" if v is None else v)}</td></tr>'
        for k, v in items.items()
    )
    return (
        "<details><summary>Settings of this run</summary>"
        f"<table><tbody>{cells}</tbody></table></details>"
    )


def _contents_html(drawn, names, quality, anchors, result):
    if not drawn:
        return ""
    items = []
    for gid in drawn:
        flags = _flags(gid, result.gauges[gid], quality)
        mark = " ⚠" if flags else ""
        name = f" — {names[gid]}" if gid in names else ""
        items.append(f'<li><a href="#{anchors[gid]}">{_e(gid)}{_e(name)}</a>{mark}</li>')
    return f'<nav id="contents"><h2>Gauges</h2><ol>{"".join(items)}</ol></nav>'


def _gauge_html(gid, g, name, catchment_quality, anchor, start_month, catchments):
    quality = {gid: catchment_quality} if catchment_quality is not None else {}
    flags = _flags(gid, g, quality)
    heading = _e(gid) + (f" — {_e(name)}" if name else "")
    out = [f'<section class="gauge" id="{anchor}"><h2>{heading}</h2>']
    if flags:
        items = "".join(f"<li>{_e(f)}</li>" for f in flags)
        out.append(
            f'<div class="flags"><strong>Check before use — {len(flags)} '
            f"quality flag{'s' if len(flags) > 1 else ''}:</strong><ul>{items}</ul></div>"
        )
    else:
        out.append('<p><span class="ok">Quality: ok</span></p>')
    out.append(_facts_html(g))
    figure = hydrograph_figure(g, water_year_start=start_month)
    if figure is not None:
        out.append(
            _img(
                figure,
                f"Hydrograph of gauge {gid} with the displacement of each event",
                "Dashed orange: pre-event recession carried along K from the lowest day before "
                "the rise; broad green: post-event recession; dotted: critical time "
                f"(peak + {CRITICAL_TIME_FACTOR} K), where Q1 (open) and Q2 (filled) are read. "
                "Recharge of an event = 2 (Q2 − Q1) K / 2.3026.",
                tight=False,
            )
        )
    else:
        out.append('<p class="note">No discharge to draw.</p>')
    rec = recession_figure(g)
    master = _master_html(g.master_recession)
    if rec is not None or master:
        out.append('<h3>Recession index</h3><div class="row">')
        if rec is not None:
            out.append(_img(rec, f"Recession segments of gauge {gid}", width=600, tight=False))
        if master:
            out.append(f"<div>{master}</div>")
        out.append("</div>")
    out.append(_annual_html(g.annual))
    out.append('<p class="note"><a href="#contents">Back to the list of gauges</a></p></section>')
    return "\n".join(out)


def _facts_html(g):
    k = g.recession
    facts = [("Drainage area", f"{_fmt(g.area_km2, 1)} km²")]
    if k is not None and np.isfinite(k.days):
        text = f"{_fmt(k.days, 1)} days" + _range(k.days, k.low, k.high, 1)
        if k.source == "given":
            text += ", given"
        facts.append(("Recession index K", text))
        facts.append(("Critical time", f"{_fmt(CRITICAL_TIME_FACTOR * k.days, 1)} days"))
        facts.append(("Segments", str(k.segments_used)))
    if np.isfinite(g.lag_days):
        facts.append(("Runoff ends after", f"{_fmt(g.lag_days, 1)} days"))
    text = "not computed"
    if np.isfinite(g.recharge_mm_per_year):
        text = f"{_fmt(g.recharge_mm_per_year)} mm/yr" + _range(
            g.recharge_mm_per_year, g.recharge_mm_per_year_low, g.recharge_mm_per_year_high
        )
    facts.append(("Mean annual recharge (years with a complete record)", text))
    if g.fully_measured_years != g.complete_years:
        facts.append(
            (
                "Mean over years with every event measured",
                f"{_fmt(g.recharge_mm_per_year_fully_measured)} mm/yr "
                f"({g.fully_measured_years} years)",
            )
        )
    slope = getattr(g, "recharge_trend_mm_per_decade", np.nan)
    if np.isfinite(slope):
        facts.append(
            (
                "Trend of annual recharge",
                f"{slope:+,.1f} mm/yr per decade, {g.recharge_trend} ("
                + (
                    "p < 0.001"
                    if g.recharge_trend_p_value < 0.001
                    else f"p = {_sig(g.recharge_trend_p_value, 2)}"
                )
                + ")",
            )
        )
    between = getattr(g, "recharge_between_events_mm_per_year", np.nan)
    if np.isfinite(between):
        facts.append(("Rise between events, not in the recharge", f"{_fmt(between, 1)} mm/yr"))
    facts.append(("Baseflow index", _fmt(g.baseflow_index, 2)))
    facts.append(("Complete water years", str(g.complete_years)))
    if len(g.events):
        used = int(g.events["used"].sum())
        facts.append(("Events measured", f"{used} of {len(g.events)}"))
    cells = "".join(f"<div><span>{_e(a)}:</span> <b>{_e(b)}</b></div>" for a, b in facts)
    return f'<div class="facts">{cells}</div>'


def _master_html(table):
    if table is None or not len(table):
        return ""
    rows = "".join(
        "<tr>"
        f"<td>{_flow(r.flow_low_m3s)} – {_flow(r.flow_high_m3s)}</td><td>{int(r.segments)}</td>"
        f"<td>{_fmt(r.recession_index_days, 1)}</td>"
        f"<td>{_fmt(r.recession_index_q25, 1)}–{_fmt(r.recession_index_q75, 1)}</td></tr>"
        for r in table.itertuples()
    )
    return (
        "<table><caption>Recession index by flow level (master recession curve)</caption>"
        "<thead><tr><th>Flow m³/s</th><th>Segments</th><th>K days</th><th>K middle half</th>"
        f"</tr></thead><tbody>{rows}</tbody></table>"
        '<p class="note">One homogeneous aquifer recedes at the same K at every flow level.</p>'
    )


def _flow(value):
    v = float(value)
    if not math.isfinite(v):
        return "–"
    return f"{v:.3g}"


def _annual_html(annual):
    if annual is None or not len(annual):
        return '<p class="note">No annual table: no water year could be computed.</p>'
    table = annual.copy()
    for name in ANNUAL_SHOWN:
        if name not in table.columns:
            table[name] = np.nan
    complete = table["complete"].astype(bool).to_numpy()
    # The low–high column only when the band is 1 mm or more wide in some year.
    show_range = any(
        _range(v, lo, hi) for v, lo, hi in table[list(ANNUAL_SHOWN[:3])].itertuples(index=False)
    )
    head = ["Water year", "Recharge<br>mm"]
    if show_range:
        head.append("Low–high<br>mm")
    head += [
        "Recharge<br>million m³",
        "Baseflow<br>mm",
        "Storage<br>change mm",
        "Residual<br>mm",
        "Seasonal<br>recession mm",
        "Baseflow<br>index",
        "Events (not<br>measured)",
        "Complete",
    ]

    def cells(values, first, note):
        v = values
        out = [first, _fmt(v["recharge_mm"])]
        if show_range:
            out.append("–".join(_ends(v["recharge_low_mm"], v["recharge_high_mm"])))
        out += [
            _sig(v["recharge_m3"] / 1e6),
            _fmt(v["baseflow_mm"]),
            _fmt(v["storage_change_mm"]),
            _fmt(v["residual_mm"]),
            _fmt(v["seasonal_recharge_mm"]),
            _fmt(v["baseflow_index"], 2),
        ]
        return out + note

    rows = []
    for i, r in enumerate(table.to_dict("records")):
        events = str(int(r["events"])) if np.isfinite(r["events"]) else "–"
        if np.isfinite(r["events_skipped"]) and r["events_skipped"]:
            events += f" ({int(r['events_skipped'])})"
        if complete[i]:
            status = "yes"
        elif np.isfinite(r["days_missing"]) and r["days_missing"]:
            unusable = float(r.get("days_zero_or_flagged", 0))
            kind = f" ({int(unusable)} zero or flagged)" if unusable > 0 else ""
            status = f"no, {int(r['days_missing'])} days missing{kind}"
        else:
            status = "no"
        row = cells(r, str(int(r["water_year"])), [events, status])
        klass = "" if complete[i] else ' class="incomplete"'
        rows.append(f"<tr{klass}>" + "".join(f"<td>{c}</td>" for c in row) + "</tr>")
    if complete.any():
        means = {name: float(table.loc[complete, name].mean()) for name in ANNUAL_SHOWN}
        row = cells(means, f"mean of {int(complete.sum())} complete", ["", ""])
        rows.append('<tr class="mean">' + "".join(f"<td>{c}</td>" for c in row) + "</tr>")
    note = (
        "Residual = recharge − baseflow − storage change. Incomplete years (grey italic) are "
        "left out of the means."
    )
    note += (
        " Low–high: the year's 90 % band (K's interval, the error of reading a daily record and "
        "the method's allowance; it says nothing for a flagged gauge)."
        if show_range
        else " The 90 % band is under 1 mm wide in every year."
    )
    return (
        '<h3>Water years</h3><div class="wide"><table><thead><tr>'
        + "".join(f"<th>{h}</th>" for h in head)
        + "</tr></thead><tbody>"
        + "".join(rows)
        + f'</tbody></table></div><p class="note">{note}</p>'
    )


#: Annual columns the report shows (the first three in this order: value, low, high).
ANNUAL_SHOWN = (
    "recharge_mm",
    "recharge_low_mm",
    "recharge_high_mm",
    "recharge_m3",
    "baseflow_mm",
    "storage_change_mm",
    "residual_mm",
    "seasonal_recharge_mm",
    "baseflow_index",
    "events",
    "events_skipped",
    "days_missing",
)


def _left_out_html(left_out, result, names, quality, max_gauges):
    rows = []
    for gid in left_out:
        g = result.gauges[gid]
        flags = _flags(gid, g, quality)
        rows.append(
            f'<tr><td class="text">{_e(gid)}</td><td class="name">{_e(names.get(gid, ""))}</td>'
            f"<td>{_fmt(g.recharge_mm_per_year)}</td>"
            f'<td class="text">{_e("; ".join(flags) if flags else "ok")}</td></tr>'
        )
    return (
        f'<section id="not-drawn"><h2>Gauges not drawn ({len(left_out)})</h2>'
        f'<p class="note">This page draws the first {max_gauges} gauges in full, to stay a '
        f"sane size; the other {len(left_out)} are listed here. Their tables are in the run's "
        "GeoPackage; a report of fewer gauges at a time draws them.</p>"
        '<table><thead><tr><th class="text">Gauge</th><th class="text">Name</th>'
        '<th>Mean annual recharge<br>mm/yr</th><th class="text">Quality</th></tr></thead>'
        f"<tbody>{''.join(rows)}</tbody></table></section>"
    )


def _method_html():
    return (
        '<section id="method"><h2>Method in brief</h2><p>'
        "Recession index K (days per log cycle) from the record's recession segments. For each "
        "event, the pre-event recession is carried along K from the lowest day before the rise "
        f"to the critical time Tc = {CRITICAL_TIME_FACTOR} K after the peak (Q1); the "
        "post-event recession gives Q2 at the same time; recharge R = 2 (Q2 − Q1) K / 2.3026 "
        "with Q as volume per day (Rorabaugh 1964). Depth = volume ÷ drainage area. Events are "
        "summed by water year of the peak. Storm runs that cannot be read one by one are "
        "measured as one composite event, allowing for the timing of its peaks. The mean "
        "annual recharge shown is over every water year whose discharge record is complete "
        "(the mean over years whose every event was measured is given beside it). Baseflow by a "
        'recursive filter (Eckhardt 2005 by default).</p><p class="note">Rorabaugh, M.I. (1964) '
        "IASH Publ. 63, 432–441. Halford, K.J. &amp; Mayer, G.C. (2000) Ground Water 38(3), "
        "331–342. Eckhardt, K. (2005) Hydrol. Process. 19, 507–515.</p></section>"
    )
