"""A small invented region for the bad-input tests: three square catchments, their gauges and a
few years of daily discharge, written to a folder so each test can spoil a copy of one file.

Nothing here is real: the gauge ids, names and places are invented, and the flows come from a
linear reservoir (groundwater falling tenfold in ``K`` days) fed by random storms, plus quickflow
and 1 % noise. The flows only need to look like a perennial stream; the accuracy of the method is
tested elsewhere against the analytic solution.
"""

from __future__ import annotations

import hashlib
from pathlib import Path

import numpy as np
import pandas as pd

#: Invented gauge ids of the region, and the names of their invented streams.
GAUGES = {"AB1": "Wendle Beck at Oxmoor", "CD2": "Pellow Water at Fenny", "EF3": "Sorrel Rill"}
#: CRS of the layers: WGS 84 / UTM zone 24N (open ocean; the demo region's CRS).
CRS = "EPSG:32624"
#: First day of the discharge records.
START = "2001-10-01"
#: Side of each square catchment (m): 100 km² each.
SIDE = 10_000.0


def flows(days: int, seed: int, recession_index_days: float = 40.0) -> np.ndarray:
    """Daily discharge (m³/s) of an invented perennial stream: storms recharge a linear
    reservoir whose outflow falls tenfold in ``recession_index_days``, plus quickflow."""
    from scipy.signal import lfilter

    rng = np.random.default_rng(seed)
    decay = 10.0 ** (-1.0 / recession_index_days)
    storms = (rng.random(days) < 0.06) * rng.exponential(4.0, days)
    # b[t] = decay b[t-1] + 12 (1 - decay) storms[t], from b = 2; q[t] = 0.3 q[t-1] + 3 storms[t]
    base, _ = lfilter([12.0 * (1.0 - decay)], [1.0, -decay], storms, zi=[2.0 * decay])
    quick = lfilter([3.0], [1.0, -0.3], storms)
    noisy = (base + quick) * (1.0 + 0.01 * rng.standard_normal(days))
    return np.round(noisy, 4)


def discharge_table(gauge_ids=tuple(GAUGES), years: int = 6, seed: int = 11) -> pd.DataFrame:
    """The long table: ``gauge_id, date, discharge`` with one row per gauge and day."""
    dates = pd.date_range(START, periods=int(365.25 * years), freq="D")
    frames = [
        pd.DataFrame(
            {
                "gauge_id": gid,
                "date": dates.strftime("%Y-%m-%d"),
                "discharge": flows(dates.size, seed + n),
            }
        )
        for n, gid in enumerate(gauge_ids)
    ]
    return pd.concat(frames, ignore_index=True)


def layers(gauge_ids=tuple(GAUGES)):
    """(gauges, catchments) GeoDataFrames: one square catchment per gauge, side by side; each
    gauge sits just inside its catchment's south-west corner (the outlet)."""
    import geopandas as gpd
    from shapely.geometry import Point, box

    x0, y0 = 480_000.0, 4_420_000.0
    squares, points = [], []
    for n, _gid in enumerate(gauge_ids):
        left = x0 + n * (SIDE + 2_000.0)
        squares.append(box(left, y0, left + SIDE, y0 + SIDE))
        points.append(Point(left + 50.0, y0 + 50.0))
    ids = list(gauge_ids)
    names = [GAUGES.get(g, f"Stream {g}") for g in ids]
    gauges = gpd.GeoDataFrame({"gauge_id": ids, "name": names}, geometry=points, crs=CRS)
    catchments = gpd.GeoDataFrame(
        {"gauge_id": ids, "name": [f"Above {n}" for n in names]}, geometry=squares, crs=CRS
    )
    return gauges, catchments


def write_region(folder, years: int = 6) -> dict:
    """Write ``gauges.gpkg``, ``catchments.gpkg`` and ``discharge.csv`` into ``folder``; return
    their paths by name."""
    folder = Path(folder)
    folder.mkdir(parents=True, exist_ok=True)
    gauges, catchments = layers()
    paths = {
        "gauges": folder / "gauges.gpkg",
        "catchments": folder / "catchments.gpkg",
        "discharge": folder / "discharge.csv",
    }
    gauges.to_file(paths["gauges"], driver="GPKG")
    catchments.to_file(paths["catchments"], driver="GPKG")
    discharge_table(years=years).to_csv(paths["discharge"], index=False)
    return paths


def digests(folder) -> dict:
    """sha256 and modification time of every file under ``folder``, by relative path."""
    folder = Path(folder)
    return {
        str(p.relative_to(folder)): (
            hashlib.sha256(p.read_bytes()).hexdigest(),
            p.stat().st_mtime_ns,
        )
        for p in sorted(folder.rglob("*"))
        if p.is_file()
    }
