"""Map furniture: the scale bar and the north arrow, measured on the ground with pyproj.

:func:`ground_scale` measures metres per map unit at the map's centre (geodesic distances on
the WGS 84 ellipsoid), :func:`map_aspect` the drawing ratio that shows the centre without
stretch, :func:`scale_bar` a bar of 1, 2 or 5 × 10^n metres and :func:`north_angle` the
direction of true north; ``_draw_furniture`` draws both on a map's axes. Every name here stays
importable from :mod:`maps` too.
"""

from __future__ import annotations

import math

import numpy as np


def _lonlat_transformers(crs):
    from pyproj import CRS, Transformer

    crs = CRS.from_user_input(crs)
    geographic = CRS.from_epsg(4326)
    to_lonlat = Transformer.from_crs(crs, geographic, always_xy=True)
    from_lonlat = Transformer.from_crs(geographic, crs, always_xy=True)
    return crs, to_lonlat, from_lonlat


def ground_scale(crs, bounds):
    """Metres on the ground per map unit along x and along y, at the centre of ``bounds``.

    Measured, not assumed: two points a thousandth of the map's width (height) apart about
    the centre are taken to longitude/latitude with pyproj and their geodesic distance on
    the WGS 84 ellipsoid is computed with :class:`pyproj.Geod` (Karney 2013, J. Geodesy 87,
    43–55). This holds for any CRS: in a geographic CRS a degree of longitude shrinks with
    the cosine of latitude; in a projected CRS the projection's own scale factor counts.

    Returns
    -------
    (float, float)
        Metres per map unit along x (east–west on the map) and along y.
    """
    from pyproj import Geod

    crs, to_lonlat, _ = _lonlat_transformers(crs)
    xmin, ymin, xmax, ymax = (float(b) for b in bounds)
    xc, yc = (xmin + xmax) / 2, (ymin + ymax) / 2
    geod = Geod(ellps="WGS84")
    out = []
    for dx, dy in (((xmax - xmin) / 1000 or 1e-6, 0.0), (0.0, (ymax - ymin) / 1000 or 1e-6)):
        lon, lat = to_lonlat.transform([xc - dx / 2, xc + dx / 2], [yc - dy / 2, yc + dy / 2])
        metres = geod.inv(lon[0], lat[0], lon[1], lat[1])[2]
        out.append(metres / (dx + dy))
    return out[0], out[1]


def map_aspect(crs, bounds):
    """The y/x drawing ratio that shows the centre of the map without stretch.

    1 for a projected CRS (its units are alike on both axes); in a geographic CRS the
    ratio of the ground length of a degree of latitude to one of longitude at the centre
    (about 1/cos(latitude)), as measured by :func:`ground_scale`.
    """
    from pyproj import CRS

    if not CRS.from_user_input(crs).is_geographic:
        return 1.0
    x_metres, y_metres = ground_scale(crs, bounds)
    return y_metres / x_metres


def scale_bar(crs, bounds, fraction=0.25):
    """A scale bar for a map of ``bounds``: its length in map units and on the ground.

    The ground length is the largest 1, 2 or 5 × 10^n metres (common practice for scale
    bars) not above ``fraction`` of the map's width, measured at the centre of the map by
    :func:`ground_scale`. In a geographic CRS the bar is true only near the centre's
    latitude; the map says so.

    Returns
    -------
    (float, float, str)
        Length in map units, length in metres, and its label (``"20 km"``, ``"500 m"``).
    """
    x_metres, _ = ground_scale(crs, bounds)
    width_m = (float(bounds[2]) - float(bounds[0])) * x_metres
    if not np.isfinite(width_m) or width_m <= 0:
        raise ValueError(f"the map has no width to scale (bounds {list(bounds)})")
    target = width_m * fraction
    power = 10.0 ** math.floor(math.log10(target))
    metres = max(m * power for m in (1, 2, 5) if m * power <= target)
    label = f"{metres / 1000:g} km" if metres >= 1000 else f"{metres:g} m"
    return metres / x_metres, metres, label


def north_angle(crs, bounds):
    """Direction of true north at the map's centre, in degrees clockwise from the map's up.

    The centre is taken to longitude/latitude and a point 0.01° of latitude north of it is
    projected back into ``crs`` (pyproj); the angle of the line between them on the drawn map
    (with the aspect of :func:`map_aspect`) is the direction of the north arrow. In a
    projected CRS it is minus the meridian convergence there; in a geographic CRS it is 0.
    """
    crs, to_lonlat, from_lonlat = _lonlat_transformers(crs)
    xmin, ymin, xmax, ymax = (float(b) for b in bounds)
    xc, yc = (xmin + xmax) / 2, (ymin + ymax) / 2
    lon, lat = to_lonlat.transform(xc, yc)
    step = 0.01 if lat < 89.98 else -0.01  # at the pole, look from just south of it
    x2, y2 = from_lonlat.transform(lon, lat + step)
    dx, dy = (x2 - xc) * np.sign(step), (y2 - yc) * np.sign(step)
    return math.degrees(math.atan2(dx, dy * map_aspect(crs, bounds)))


def _draw_furniture(ax, crs, bounds):
    """Scale bar (lower left) and north arrow (lower right); a note of what they mean."""
    from matplotlib import patheffects

    length, _, label = scale_bar(crs, bounds)
    x0, y0 = bounds[0], bounds[1]
    width, height = bounds[2] - bounds[0], bounds[3] - bounds[1]
    bx, by = x0 + 0.03 * width, y0 + 0.04 * height
    halo = [patheffects.withStroke(linewidth=3, foreground="white")]
    ax.plot(
        [bx, bx + length],
        [by, by],
        color="black",
        linewidth=3,
        solid_capstyle="butt",
        zorder=7,
        gid="scale-bar",
        path_effects=[patheffects.withStroke(linewidth=5, foreground="white")],
    )
    for x in (bx, bx + length):
        ax.plot([x, x], [by, by + 0.015 * height], color="black", linewidth=1, zorder=7)
    ax.text(
        bx + length / 2,
        by + 0.02 * height,
        label,
        ha="center",
        va="bottom",
        fontsize=8,
        zorder=7,
        gid="scale-bar-label",
        path_effects=halo,
    )
    angle = math.radians(north_angle(crs, bounds))
    size = 28.0  # points
    tail = (-size * math.sin(angle), -size * math.cos(angle))
    ax.annotate(
        "",
        xy=(0.95, 0.16),
        xycoords="axes fraction",
        xytext=tail,
        textcoords="offset points",
        arrowprops={"arrowstyle": "-|>", "color": "black", "linewidth": 1.5, "mutation_scale": 14},
        zorder=7,
        gid="north-arrow",
    )
    ax.annotate(
        "N",
        xy=(0.95, 0.16),
        xycoords="axes fraction",
        xytext=(6 * math.sin(angle), 6 * math.cos(angle)),
        textcoords="offset points",
        ha="center",
        va="center",
        fontsize=9,
        fontweight="bold",
        zorder=7,
        path_effects=halo,
    )
