"""Generate the invented demo region and synthetic regions with known truth.

The region is made up: an island in the open North Atlantic, with invented river and gauge
names. Its streamflow is built from the analytic stream–aquifer response (Rorabaugh 1960;
Glover 1964; see :mod:`recharge_atlas.algorithms.analytic`) to known recharge pulses, plus
quickflow and gauging noise, so the true recharge and recession index of every gauge are known.

How the flow is made
--------------------
* The region is tiled by elementary drainage units. Each unit lies on one aquifer (strip
  half-width ``a``, storage coefficient ``S``, transmissivity ``T``), so its true recession index
  is ``K = 0.933 a²S/T``.
* Storms fall on random days, more often in winter. Each storm gives a recharge depth, higher in
  the cool season, scaled per unit by a fixed spatial factor and a small random factor. Recharge
  arrives at noon of the storm day as an instantaneous pulse (the method's assumption).
* Groundwater discharge of a unit is the pulse train convolved with the daily-mean response of
  its strip aquifer (mass-conserving). Quickflow is a pulse that ends within the runoff-end lag
  ``N = A^0.2`` days (A in mi², Linsley, Kohler & Paulhus) of the unit.
* A gauge measures the sum of its upstream units, with multiplicative gauging noise and rounding
  to a few significant figures. One gauge has a poor record (a late start and many gaps).

Run ``python -m recharge_atlas.sample_layers.generate`` (or ``python sample_layers/generate.py``)
to rewrite the files in this folder.
"""

from __future__ import annotations

import argparse
import json
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np
import pandas as pd

HERE = Path(__file__).resolve().parent

#: Projected CRS of the demo layers: WGS 84 / UTM zone 24N (an empty stretch of ocean).
DEMO_CRS = "EPSG:32624"
#: Offset of the region's local kilometre grid in the CRS (metres).
ORIGIN = (480_000.0, 4_420_000.0)
#: Name of the invented region.
REGION_NAME = "Isle of Quenmoor"


@dataclass(frozen=True)
class Aquifer:
    """An ideal strip aquifer: half-width (m), storage coefficient (-), transmissivity (m²/d)."""

    name: str
    half_width_m: float
    storage_coefficient: float
    transmissivity_m2_per_day: float

    @property
    def recession_index_days(self) -> float:
        from recharge_atlas.algorithms.analytic import strip_aquifer_recession_index

        return float(
            strip_aquifer_recession_index(
                self.half_width_m, self.storage_coefficient, self.transmissivity_m2_per_day
            )
        )


AQUIFERS = {
    "Quen sands": Aquifer("Quen sands", 900.0, 0.015, 250.0),  # K ≈ 45 d
    "Harl chalk": Aquifer("Harl chalk", 1400.0, 0.02, 400.0),  # K ≈ 91 d
    "Tobble grits": Aquifer("Tobble grits", 600.0, 0.01, 150.0),  # K ≈ 22 d
}


@dataclass(frozen=True)
class Unit:
    """An elementary drainage unit: a box on the local km grid, its aquifer and gauge."""

    unit_id: str
    box: tuple  # (xmin, ymin, xmax, ymax) in km on the local grid
    aquifer: str
    recharge_factor: float
    gauge: str | None  # the nearest gauge downstream, or None when ungauged
    downstream: str | None  # the unit it drains into, or None at the sea
    name: str


# Main river (the Quen): G4 ⊂ G2 ⊂ G1, and G3 ⊂ G1 on a tributary. Two more gauged basins and
# three ungauged ones. The units are also the demo's subbasin map (subbasins.gpkg).
UNITS = (
    Unit("U1", (0, 5, 6, 15), "Quen sands", 1.25, "QM04", "U2", "Hobble Head"),
    Unit("U2", (0, 0, 15, 20), "Quen sands", 1.05, "QM02", "U4", "Dappling"),  # minus U1
    Unit("U3", (15, 10, 27, 20), "Quen sands", 0.85, "QT03", "U4", "Tansy Water"),
    Unit("U4", (0, 0, 40, 20), "Quen sands", 0.90, "QM01", None, "Lower Quen"),  # minus U1–U3
    Unit("U5", (42, 0, 52, 20), "Harl chalk", 0.80, "HB05", None, "Harlbeck"),
    Unit("U6", (42, 22, 51, 32), "Tobble grits", 1.15, "TB06", None, "Tobble"),
    Unit("U7", (0, 21, 20, 25), "Quen sands", 1.00, None, None, "North Quen slopes"),
    Unit("U8", (21, 21, 40, 24), "Quen sands", 0.95, None, None, "Marrow Flats"),
    Unit("U9", (53, 0, 58, 10), "Harl chalk", 0.85, None, None, "Cray Point"),
)

#: Gauges: id, name, outlet on the local km grid, and the units that drain through it.
GAUGES = (
    ("QM01", "Quen at Saltmere Bar", (40.0, 10.0), ("U1", "U2", "U3", "U4")),
    ("QM02", "Quen at Dappling Ford", (15.0, 8.0), ("U1", "U2")),
    ("QT03", "Tansy Water at Orlop Mill", (21.0, 10.0), ("U3",)),
    ("QM04", "Quen at Hobble Head", (6.0, 10.0), ("U1",)),
    ("HB05", "Harlbeck at Cray Stile", (47.0, 0.0), ("U5",)),
    ("TB06", "Tobble Brook at Wenlow", (46.5, 22.0), ("U6",)),
)
#: Names of the ungauged catchments.
UNGAUGED_NAMES = {"U7": "North Quen slopes", "U8": "Marrow Flats", "U9": "Cray Point"}
#: The gauge with the poor record.
POOR_GAUGE = "TB06"


@dataclass
class SyntheticRegion:
    """Layers, discharge and known truth of a synthetic region.

    Attributes
    ----------
    gauges, catchments : geopandas.GeoDataFrame
        Gauge points and total-drainage catchment polygons (nested ones overlap).
    subbasins : geopandas.GeoDataFrame
        The same region as a subbasin map: non-overlapping units with ``subbasin_id`` and
        ``downstream_id``.
    discharge : pandas.DataFrame
        Long table ``gauge_id, date, discharge`` in m³/s.
    truth_gauges : pandas.DataFrame
        Per gauge: true recession index, area, mean annual recharge over all water years.
    truth_annual : pandas.DataFrame
        Per gauge and water year: true recharge depth and volume.
    truth_units : pandas.DataFrame
        Per elementary unit and water year: area and recharge (for incremental checks).
    settings : dict
        The settings the region was made with.
    """

    gauges: object
    catchments: object
    discharge: pd.DataFrame
    truth_gauges: pd.DataFrame
    truth_annual: pd.DataFrame
    truth_units: pd.DataFrame
    settings: dict = field(default_factory=dict)
    subbasins: object = None


# --------------------------------------------------------------------------- geometry


def _warp(x, y):
    """A smooth, gentle warp of the local km grid so boundaries are not straight lines."""
    x = np.asarray(x, dtype=float)
    y = np.asarray(y, dtype=float)
    wx = x + 0.9 * np.sin(y / 3.1) + 0.5 * np.sin((x + y) / 4.3)
    wy = y + 0.8 * np.sin(x / 3.7) + 0.4 * np.cos((x - y) / 5.9)
    return ORIGIN[0] + 1000.0 * wx, ORIGIN[1] + 1000.0 * wy


def _unit_polygons():
    from shapely.geometry import box

    raw = {u.unit_id: box(*u.box) for u in UNITS}
    # Units listed with an enclosing box give up what smaller units already took.
    raw["U2"] = raw["U2"].difference(raw["U1"])
    raw["U4"] = raw["U4"].difference(box(0, 0, 15, 20)).difference(raw["U3"])
    polygons = {}
    for unit_id, poly in raw.items():
        polygons[unit_id] = _segmentize(poly, 0.25, _warp)
    return polygons


def _segmentize(polygon, step, warp):
    """Add vertices every ``step`` along each edge, then warp them (shapely 1.8 and 2)."""
    from shapely.geometry import Polygon

    def ring(coords):
        coords = list(coords)
        out = []
        for (x0, y0), (x1, y1) in zip(coords[:-1], coords[1:]):
            n = max(int(round(np.hypot(x1 - x0, y1 - y0) / step)), 1)
            for i in range(n):
                out.append((x0 + (x1 - x0) * i / n, y0 + (y1 - y0) * i / n))
        out.append(out[0])
        x, y = warp(*np.asarray(out).T)
        return list(zip(x, y))

    return Polygon(ring(polygon.exterior.coords), [ring(r.coords) for r in polygon.interiors])


def _layers(polygons):
    import geopandas as gpd
    from shapely.geometry import Point
    from shapely.ops import unary_union

    gauge_rows, basin_rows = [], []
    for gauge_id, name, (x, y), units in GAUGES:
        px, py = _warp(x, y)
        gauge_rows.append({"gauge_id": gauge_id, "name": name, "geometry": Point(px, py)})
        basin = unary_union([polygons[u] for u in units])
        basin_rows.append({"gauge_id": gauge_id, "name": f"Above {name}", "geometry": basin})
    for unit_id, name in UNGAUGED_NAMES.items():
        basin_rows.append({"gauge_id": None, "name": name, "geometry": polygons[unit_id]})
    gauges = gpd.GeoDataFrame(gauge_rows, geometry="geometry", crs=DEMO_CRS)
    catchments = gpd.GeoDataFrame(basin_rows, geometry="geometry", crs=DEMO_CRS)
    subbasins = gpd.GeoDataFrame(
        [
            {
                "subbasin_id": u.unit_id,
                "downstream_id": u.downstream,
                "name": u.name,
                "geometry": polygons[u.unit_id],
            }
            for u in UNITS
        ],
        geometry="geometry",
        crs=DEMO_CRS,
    )
    return gauges, catchments, subbasins


def _geodesic_km2(geometries, crs):
    """Unit areas on the ellipsoid, so the truth uses the same areas as the product."""
    import geopandas as gpd
    from pyproj import CRS

    lonlat = gpd.GeoSeries(list(geometries), crs=crs).to_crs(CRS(crs).geodetic_crs)
    geod = CRS(crs).get_geod()
    return np.array([abs(geod.geometry_area_perimeter(g)[0]) / 1e6 for g in lonlat])


# --------------------------------------------------------------------------- weather and flow


def _storms(rng, dates):
    """Storm rainfall (mm) per day: more frequent and more effective at recharge in winter."""
    doy = np.asarray(dates.day_of_year)
    winter = 0.5 * (1.0 + np.cos(2.0 * np.pi * (doy - 20) / 365.25))  # 1 in mid-January
    chance = 0.035 + 0.085 * winter  # about 28 storm days a year
    wet = rng.random(dates.size) < chance
    rain = np.where(wet, rng.gamma(1.2, 22.0, dates.size), 0.0)
    efficiency = 0.05 + 0.45 * winter  # share of rain beyond 6 mm that becomes recharge
    recharge = efficiency * np.clip(rain - 6.0, 0.0, None)
    quick = 0.12 * rain
    return recharge, quick


def _quickflow_kernel(duration_days, pulse_time=0.5, steps=48):
    """Daily means of a quickflow pulse shaped (1 − t/D)², ending D days after noon."""
    days = int(np.ceil(duration_days + pulse_time)) + 1
    t = (np.arange(days * steps) + 0.5) / steps - pulse_time
    shape = np.where((t >= 0) & (t < duration_days), (1.0 - t / duration_days) ** 2, 0.0)
    daily = shape.reshape(days, steps).mean(axis=1)
    return daily / daily.sum()


def _convolve(pulses, kernel):
    from scipy.signal import fftconvolve

    out = fftconvolve(pulses, kernel)[: pulses.size]
    return np.clip(out, 0.0, None)


def _round_significant(values, digits):
    values = np.asarray(values, dtype=float)
    with np.errstate(divide="ignore", invalid="ignore"):
        magnitude = np.where(values > 0, np.floor(np.log10(np.abs(values))), 0.0)
    scale = 10.0 ** (digits - 1 - magnitude)
    return np.round(values * scale) / scale


def water_year_of(dates, start_month=10):
    """Water year named by the calendar year in which it ends (independent of the core)."""
    dates = pd.DatetimeIndex(dates)
    return dates.year + (dates.month >= start_month).astype(int) * (1 if start_month > 1 else 0)


def make_region(
    seed=20261201,
    start="2000-10-01",
    years=24,
    noise=0.02,
    significant_figures=3,
    poor_record=True,
    spin_up_years=3,
):
    """Build a synthetic region with known truth.

    Parameters
    ----------
    seed : int
        Random seed; the same seed gives the same region.
    start : str
        First day of the record (the start of a water year, 1 October, keeps years whole).
    years : int
        Length of the record in years.
    noise : float
        Standard deviation of the multiplicative gauging noise (0.02 is 2 %).
    significant_figures : int or None
        Round published flows to this many significant figures (None keeps them exact).
    poor_record : bool
        Give gauge ``TB06`` a late start and many gaps.
    spin_up_years : int
        Years simulated before ``start`` so the aquifers begin in a realistic state.
    """
    rng = np.random.default_rng(seed)
    first = pd.Timestamp(start)
    dates_all = pd.date_range(
        first - pd.DateOffset(years=spin_up_years),
        first + pd.DateOffset(years=years) - pd.Timedelta(days=1),
        freq="D",
    )
    keep = dates_all >= first
    dates = dates_all[keep]

    polygons = _unit_polygons()
    gauges, catchments, subbasins = _layers(polygons)
    unit_ids = [u.unit_id for u in UNITS]
    unit_area = dict(zip(unit_ids, _geodesic_km2([polygons[u] for u in unit_ids], DEMO_CRS)))

    recharge_regional, quick_regional = _storms(rng, dates_all)
    unit_gw, unit_qf, unit_recharge = {}, {}, {}
    for unit in UNITS:
        aquifer = AQUIFERS[unit.aquifer]
        # Each storm's recharge varies a little from unit to unit around the unit's factor.
        local = unit.recharge_factor * rng.lognormal(-0.02, 0.2, dates_all.size)
        recharge = recharge_regional * local
        kernel = _gw_kernel(aquifer.recession_index_days, dates_all.size)
        lag = (unit_area[unit.unit_id] / 2.589988110336) ** 0.2
        unit_gw[unit.unit_id] = _convolve(recharge, kernel)  # mm/day
        unit_qf[unit.unit_id] = _convolve(quick_regional * local, _quickflow_kernel(0.8 * lag))
        unit_recharge[unit.unit_id] = recharge

    wy = water_year_of(dates_all)
    rows, truth_rows, annual_rows, unit_rows = [], [], [], []
    for unit in UNITS:
        per_year = pd.Series(unit_recharge[unit.unit_id][keep]).groupby(np.asarray(wy[keep])).sum()
        for year, depth in per_year.items():
            unit_rows.append(
                {
                    "unit_id": unit.unit_id,
                    "gauge_id": unit.gauge,
                    "water_year": int(year),
                    "area_km2": unit_area[unit.unit_id],
                    "recharge_mm": float(depth),
                    "recharge_m3": float(depth) * unit_area[unit.unit_id] * 1e3,
                }
            )

    for gauge_id, name, _, units in GAUGES:
        area = sum(unit_area[u] for u in units)
        mm_per_day = sum((unit_gw[u] + unit_qf[u]) * unit_area[u] for u in units) / area
        baseflow = sum(unit_gw[u] * unit_area[u] for u in units) / area
        flow = mm_per_day * area * 1e3 / 86400.0  # m³/s
        flow = flow[keep] * rng.lognormal(0.0, noise, dates.size) if noise else flow[keep]
        if significant_figures:
            flow = _round_significant(flow, significant_figures)
        record = pd.Series(flow, index=dates)
        if poor_record and gauge_id == POOR_GAUGE:
            record = _spoil(record, rng)
        rows.append(
            pd.DataFrame(
                {"gauge_id": gauge_id, "date": record.index, "discharge": record.to_numpy()}
            )
        )

        recharge_mm = sum(unit_recharge[u][keep] * unit_area[u] for u in units) / area
        per_year = pd.Series(recharge_mm).groupby(np.asarray(wy[keep])).sum()
        for year, depth in per_year.items():
            annual_rows.append(
                {
                    "gauge_id": gauge_id,
                    "water_year": int(year),
                    "recharge_mm": float(depth),
                    "recharge_m3": float(depth) * area * 1e3,
                }
            )
        aquifer = AQUIFERS[UNITS[unit_ids.index(units[0])].aquifer]
        truth_rows.append(
            {
                "gauge_id": gauge_id,
                "name": name,
                "area_km2": area,
                "recession_index_days": aquifer.recession_index_days,
                "recharge_mm_per_year": float(per_year.mean()),
                "baseflow_share": float(baseflow[keep].sum() / mm_per_day[keep].sum()),
                "aquifer": aquifer.name,
                "half_width_m": aquifer.half_width_m,
                "storage_coefficient": aquifer.storage_coefficient,
                "transmissivity_m2_per_day": aquifer.transmissivity_m2_per_day,
                "poor_record": bool(poor_record and gauge_id == POOR_GAUGE),
            }
        )

    discharge = pd.concat(rows, ignore_index=True)
    discharge["date"] = pd.to_datetime(discharge["date"]).dt.strftime("%Y-%m-%d")
    settings = {
        "region": REGION_NAME,
        "seed": seed,
        "start": str(first.date()),
        "years": years,
        "noise": noise,
        "significant_figures": significant_figures,
        "poor_record": poor_record,
        "crs": DEMO_CRS,
    }
    return SyntheticRegion(
        gauges=gauges,
        catchments=catchments,
        discharge=discharge,
        truth_gauges=pd.DataFrame(truth_rows),
        truth_annual=pd.DataFrame(annual_rows),
        truth_units=pd.DataFrame(unit_rows),
        settings=settings,
        subbasins=subbasins,
    )


def truth_errors(region: SyntheticRegion, result) -> pd.DataFrame:
    """Compare a pipeline result with a region's truth, one row per gauge.

    Mean annual recharge is compared over the water years the run found complete, against the
    truth of the same years. Columns: ``gauge_id, poor_record, complete_years, recharge_mm,
    true_recharge_mm, recharge_error, k_days, true_k_days, k_error, baseflow_index,
    true_groundwater_share, bfi_error, quality``; errors are relative except ``bfi_error``.
    """
    rows = []
    truth_annual = region.truth_annual
    for _, truth in region.truth_gauges.iterrows():
        gid = truth["gauge_id"]
        gauge = result.gauges[gid]
        annual = gauge.annual
        complete = (
            annual.loc[annual["complete"].astype(bool), "water_year"]
            if len(annual)
            else pd.Series(dtype=int)
        )
        same_years = truth_annual[
            (truth_annual["gauge_id"] == gid) & truth_annual["water_year"].isin(complete)
        ]
        true_mean = same_years["recharge_mm"].mean() if len(same_years) else np.nan
        k = gauge.recession.days if gauge.recession is not None else np.nan
        rows.append(
            {
                "gauge_id": gid,
                "poor_record": bool(truth["poor_record"]),
                "complete_years": len(complete),
                "recharge_mm": gauge.recharge_mm_per_year,
                "true_recharge_mm": true_mean,
                "recharge_error": gauge.recharge_mm_per_year / true_mean - 1.0,
                "k_days": k,
                "true_k_days": truth["recession_index_days"],
                "k_error": k / truth["recession_index_days"] - 1.0,
                "baseflow_index": gauge.baseflow_index,
                "true_groundwater_share": truth["baseflow_share"],
                "bfi_error": gauge.baseflow_index - truth["baseflow_share"],
                "quality": gauge.quality_text,
            }
        )
    return pd.DataFrame(rows)


def _gw_kernel(recession_index_days, n_days):
    from recharge_atlas.algorithms.analytic import strip_aquifer_daily_response

    length = min(n_days, int(20 * recession_index_days) + 10)
    return strip_aquifer_daily_response(recession_index_days, length)


def _spoil(record, rng):
    """A poor record: nothing before the last eight years, then many gaps of days to months."""
    record = record.copy()
    record.iloc[: max(record.size - 8 * 365, 0)] = np.nan
    start = max(record.size - 8 * 365, 0)
    position = start
    while position < record.size:
        position += int(rng.integers(20, 120))
        length = int(rng.integers(3, 70))
        record.iloc[position : position + length] = np.nan
        position += length
    return record[record.index >= record.index[start]]


@dataclass
class SyntheticNetwork:
    """Many independent gauged catchments for timing runs, as arrays.

    Attributes
    ----------
    gauges, catchments : geopandas.GeoDataFrame
        One square catchment per gauge on a grid, the gauge at its south edge.
    dates : pandas.DatetimeIndex
    flow : numpy.ndarray
        Daily flow, m³/s, shape (gauges, days).
    recession_index_days : numpy.ndarray
        True K of each gauge.
    """

    gauges: object
    catchments: object
    dates: pd.DatetimeIndex
    flow: np.ndarray
    recession_index_days: np.ndarray

    def discharge_table(self) -> pd.DataFrame:
        """The long table ``gauge_id, date, discharge`` the pipeline reads."""
        n_gauges, n_days = self.flow.shape
        return pd.DataFrame(
            {
                "gauge_id": np.repeat(self.gauges["gauge_id"].to_numpy(), n_days),
                "date": np.tile(self.dates.to_numpy(), n_gauges),
                "discharge": self.flow.reshape(-1),
            }
        )


def make_network(
    n_gauges=100, years=30, seed=1, noise=0.02, significant_figures=3, start="1990-10-01"
):
    """A synthetic network of independent gauges for benchmarks (invented names N0001, …).

    Each gauge drains a square catchment of 30–900 km² on its own strip aquifer (K drawn from
    a handful of values between 20 and 150 days, so convolutions can be shared). Recharge,
    quickflow and noise follow :func:`make_region`.
    """
    import geopandas as gpd
    from scipy.signal import fftconvolve
    from shapely.geometry import Point, box

    rng = np.random.default_rng(seed)
    spin = 365 * 2
    first = pd.Timestamp(start)
    dates = pd.date_range(
        first, first + pd.DateOffset(years=years) - pd.Timedelta(days=1), freq="D"
    )
    n_days = dates.size
    all_dates = pd.date_range(first - pd.Timedelta(days=spin), dates[-1], freq="D")
    k_choices = np.array([20.0, 30.0, 45.0, 65.0, 90.0, 150.0])
    k_of = rng.choice(k_choices, n_gauges)
    side_km = np.sqrt(rng.uniform(30.0, 900.0, n_gauges))
    area = side_km**2
    flow = np.empty((n_gauges, n_days))
    for k in k_choices:
        rows = np.flatnonzero(k_of == k)
        if rows.size == 0:
            continue
        recharge, quick = (
            np.empty((rows.size, all_dates.size)),
            np.empty((rows.size, all_dates.size)),
        )
        for i in range(rows.size):
            recharge[i], quick[i] = _storms(rng, all_dates)
        gw = fftconvolve(recharge, _gw_kernel(k, all_dates.size)[None, :], axes=1)[
            :, : all_dates.size
        ]
        qf = fftconvolve(quick, _quickflow_kernel(2.0)[None, :], axes=1)[:, : all_dates.size]
        mm = np.clip(gw, 0.0, None) + np.clip(qf, 0.0, None)
        q = mm[:, spin:] * area[rows, None] * 1e3 / 86400.0
        if noise:
            q = q * rng.lognormal(0.0, noise, q.shape)
        if significant_figures:
            q = _round_significant(q, significant_figures)
        flow[rows] = q
    columns = int(np.ceil(np.sqrt(n_gauges)))
    ids = [f"N{i + 1:05d}" for i in range(n_gauges)]
    x0 = ORIGIN[0] + 40_000.0 * (np.arange(n_gauges) % columns)
    y0 = ORIGIN[1] + 40_000.0 * (np.arange(n_gauges) // columns)
    side = side_km * 1000.0
    catchments = gpd.GeoDataFrame(
        {"gauge_id": ids, "geometry": [box(x, y, x + s, y + s) for x, y, s in zip(x0, y0, side)]},
        crs=DEMO_CRS,
    )
    gauges = gpd.GeoDataFrame(
        {"gauge_id": ids, "geometry": [Point(x + s / 2, y) for x, y, s in zip(x0, y0, side)]},
        crs=DEMO_CRS,
    )
    return SyntheticNetwork(gauges, catchments, dates, flow, k_of)


def write_region(region: SyntheticRegion, folder) -> dict:
    """Write a region's layers, discharge and truth into ``folder``; return the paths."""
    folder = Path(folder)
    folder.mkdir(parents=True, exist_ok=True)
    paths = {
        "gauges": folder / "gauges.gpkg",
        "catchments": folder / "catchments.gpkg",
        "subbasins": folder / "subbasins.gpkg",
        "discharge": folder / "discharge.csv",
        "truth_gauges": folder / "truth_gauges.csv",
        "truth_annual": folder / "truth_annual.csv",
        "truth_units": folder / "truth_units.csv",
        "settings": folder / "truth_settings.json",
    }
    for key in ("gauges", "catchments", "subbasins"):
        if paths[key].exists():
            paths[key].unlink()
    from recharge_atlas.algorithms.files import write_layer

    for key in ("gauges", "catchments", "subbasins"):
        write_layer(getattr(region, key), paths[key], key)
    region.discharge.to_csv(paths["discharge"], index=False, float_format="%.6g", na_rep="")
    region.truth_gauges.to_csv(paths["truth_gauges"], index=False, float_format="%.6g")
    region.truth_annual.to_csv(paths["truth_annual"], index=False, float_format="%.6g")
    region.truth_units.to_csv(paths["truth_units"], index=False, float_format="%.6g")
    paths["settings"].write_text(json.dumps(region.settings, indent=2) + "\n", encoding="utf-8")
    return paths


def main(argv=None):
    parser = argparse.ArgumentParser(description=f"Write the invented demo region ({REGION_NAME}).")
    parser.add_argument("--out", default=str(HERE), help="folder to write (default: this folder)")
    parser.add_argument("--seed", type=int, default=20261201)
    args = parser.parse_args(argv)
    paths = write_region(make_region(seed=args.seed), args.out)
    print(f"wrote {len(paths)} files to {args.out}")
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
