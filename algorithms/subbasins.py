"""Subbasin maps: non-overlapping subbasins with a downstream link, and gauges located in them.

This is the second way to describe basins. Each gauge sits at the outlet of the subbasin it lies
in; its total drainage area is that subbasin and every subbasin upstream of it. Each subbasin
takes the incremental recharge depth of the nearest gauge downstream. A subbasin with no gauge
downstream either stays empty or borrows the depth of the nearest gauged area (a donor), and its
``estimate_source`` says which.
"""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np
import pandas as pd

from .discharge import gauge_id_text, require_columns
from .errors import InputError

#: Fields added to the subbasins layer, in order.
SUBBASIN_FIELDS = (
    "downstream_gauge",
    "recharge_mm_per_year",
    "recharge_m3_per_year",
    "estimate_source",
    "area_km2",
    "quality",
)

#: What to do with a subbasin that has no gauge downstream.
UNGAUGED_CHOICES = ("donor", "empty")


@dataclass
class SubbasinNetwork:
    """Subbasins and how they drain.

    Attributes
    ----------
    ids : list of str
        Subbasin ids in layer order.
    downstream : dict
        Subbasin id to the id of the subbasin it drains into (None at an outlet).
    upstream : dict
        Subbasin id to the ids draining directly into it.
    notes : list of str
        Problems found and how they were treated (e.g. a downstream id that matches nothing).
    """

    ids: list
    downstream: dict
    upstream: dict = field(default_factory=dict)
    notes: list = field(default_factory=list)

    def all_upstream(self, start):
        """``start`` and every subbasin draining into it, directly or not."""
        seen = [start]
        stack = [start]
        members = {start}
        while stack:
            current = stack.pop()
            for up in self.upstream.get(current, []):
                if up not in members:
                    members.add(up)
                    seen.append(up)
                    stack.append(up)
        return seen

    def downstream_chain(self, start):
        """``start`` and the subbasins below it, in order, to the outlet."""
        chain = [start]
        current = self.downstream.get(start)
        while current is not None:
            chain.append(current)
            current = self.downstream.get(current)
        return chain


def read_network(subbasins, id_field, downstream_field) -> SubbasinNetwork:
    """Read the drainage network from a subbasin layer's id and downstream-id fields.

    Raises :class:`InputError` for missing fields, duplicate or missing ids and loops. A
    downstream id that matches no subbasin is taken as an outlet and noted.
    """
    require_columns(subbasins, [id_field, downstream_field], "subbasins layer")
    ids = list(gauge_id_text(subbasins[id_field].to_numpy()))
    down = list(gauge_id_text(subbasins[downstream_field].to_numpy()))
    missing = [row for row, i in enumerate(ids) if i is None]
    if missing:
        raise InputError(
            f"{len(missing)} subbasins have no id (first at row {missing[0]})", field=id_field
        )
    seen = set()
    duplicates = sorted({i for i in ids if i in seen or seen.add(i)})
    if duplicates:
        raise InputError(
            f"subbasin ids must be unique; repeated: {', '.join(duplicates[:5])}", field=id_field
        )
    known = set(ids)
    network = SubbasinNetwork(ids=ids, downstream={})
    for sid, target in zip(ids, down):
        if target is not None and target not in known:
            network.notes.append(
                f"subbasin {sid}: downstream id {target} matches no subbasin; taken as an outlet"
            )
            target = None
        if target == sid:
            raise InputError(f"subbasin {sid} drains into itself", field=downstream_field)
        network.downstream[sid] = target
        network.upstream.setdefault(sid, [])
        if target is not None:
            network.upstream.setdefault(target, []).append(sid)
    _check_loops(network, downstream_field)
    return network


def _check_loops(network, field_name):
    state = {}
    for start in network.ids:
        path = []
        current = start
        while current is not None and state.get(current) is None:
            state[current] = "visiting"
            path.append(current)
            current = network.downstream.get(current)
        if current is not None and state.get(current) == "visiting":
            loop = path[path.index(current) :]
            raise InputError(
                f"the subbasins drain in a loop: {' -> '.join(loop + [current])}", field=field_name
            )
        for sid in path:
            state[sid] = "done"


def locate_gauges(network, subbasins, gauge_ids, gauge_points, tolerance_m=100.0):
    """Find the subbasin each gauge sits at the outlet of.

    A gauge inside a subbasin, or within ``tolerance_m`` of its boundary, may belong to it.
    On a boundary shared by a subbasin and the one it drains into, the gauge belongs to the
    upstream one (it is its outlet). Otherwise several candidates make the gauge ambiguous.

    Returns
    -------
    located : dict
        Gauge id to subbasin id.
    notes : dict
        Gauge id to a sentence for gauges that could not be located, or that share a subbasin.
    """
    from .basins import link_spatially

    links = link_spatially(
        gauge_ids, gauge_points, subbasins.geometry, tolerance_m, overlap_tolerance=0.0
    )
    located, notes = {}, dict(links.notes)
    point_of = dict(zip(gauge_ids, gauge_points.to_crs(subbasins.crs)))
    for gid, rows in links.ambiguous.items():
        # A gauge inside exactly one of the candidates belongs to it. Subbasins do not overlap,
        # so one on a shared boundary fits several: if one of them drains (directly or not)
        # into all the others, the gauge is its outlet.
        sids = [network.ids[r] for r in rows]
        inside = [
            network.ids[r] for r in rows if subbasins.geometry.iloc[r].contains(point_of[gid])
        ]
        outlet = (
            inside
            if len(inside) == 1
            else [s for s in sids if all(o in network.downstream_chain(s) for o in sids)]
        )
        if len(outlet) == 1:
            located[gid] = outlet[0]
            notes.pop(gid, None)
        else:
            notes[gid] = (
                f"ambiguous: gauge lies on the boundary of subbasins {', '.join(sids)}, none of which drains into the others"
            )
    for gid, row in links.catchment_of.items():
        located[gid] = network.ids[row]
    # link_spatially gives a subbasin to one gauge only; say so for the others.
    by_subbasin = {}
    for gid, sid in located.items():
        by_subbasin.setdefault(sid, []).append(gid)
    for sid, gids in by_subbasin.items():
        if len(gids) > 1:
            keep = gids[0]
            for gid in gids[1:]:
                located.pop(gid)
                notes[gid] = f"shares subbasin {sid} with gauge {keep}; not used"
    return located, notes


def gauge_basins(network, subbasins, located, id_field):
    """Total drainage polygon of each located gauge: its subbasin and all upstream of it.

    Returns a GeoDataFrame with ``gauge_id``, ``subbasins`` (how many) and the geometry, in
    the subbasins' CRS.
    """
    import geopandas as gpd
    from shapely.ops import unary_union

    geometry_of = dict(zip(network.ids, subbasins.geometry))
    rows = []
    for gid, sid in located.items():
        members = network.all_upstream(sid)
        shape = unary_union([geometry_of[m] for m in members if geometry_of[m] is not None])
        rows.append(
            {"gauge_id": gid, "subbasin": sid, "subbasins": len(members), "geometry": shape}
        )
    return gpd.GeoDataFrame(
        rows,
        columns=["gauge_id", "subbasin", "subbasins", "geometry"],
        geometry="geometry",
        crs=subbasins.crs,
    )


def subbasin_estimates(network, subbasins, located, depth_of, ungauged="donor", areas_km2=None):
    """Recharge depth for every subbasin from the nearest gauge downstream.

    Parameters
    ----------
    network : SubbasinNetwork
    subbasins : geopandas.GeoDataFrame
    located : dict
        Gauge id to the subbasin at whose outlet it sits.
    depth_of : dict
        Gauge id to its incremental recharge depth (mm/yr; NaN when none).
    ungauged : {"donor", "empty"}
        A subbasin with no gauge downstream borrows the depth of the nearest gauged subbasin
        (by distance between their representative points on the ellipsoid), or stays empty.
    areas_km2 : array_like, optional
        Geodesic areas of the subbasins (computed when not given).

    Returns
    -------
    pandas.DataFrame
        One row per subbasin, in layer order: ``downstream_gauge``, ``recharge_mm_per_year``,
        ``recharge_m3_per_year``, ``estimate_source``, ``area_km2``.
    """
    from .basins import geodesic_area_km2

    if ungauged not in UNGAUGED_CHOICES:
        raise InputError(f"ungauged was {ungauged!r}; expected one of {list(UNGAUGED_CHOICES)}")
    gauge_at = {sid: gid for gid, sid in located.items()}
    areas = np.asarray(
        areas_km2 if areas_km2 is not None else geodesic_area_km2(subbasins.geometry, "subbasins"),
        dtype=float,
    )
    nearest = {}
    for sid in network.ids:
        for step in network.downstream_chain(sid):
            if step in gauge_at:
                nearest[sid] = gauge_at[step]
                break
    rows = []
    for row, sid in enumerate(network.ids):
        gid = nearest.get(sid)
        if gid is not None:
            depth = float(depth_of.get(gid, np.nan))
            source = f"gauge {gid}" if np.isfinite(depth) else f"gauge {gid} (no estimate)"
        else:
            depth, source = np.nan, "no gauge downstream"
        rows.append(
            {
                "downstream_gauge": gid,
                "recharge_mm_per_year": depth,
                "estimate_source": source,
                "area_km2": areas[row],
            }
        )
    table = pd.DataFrame(rows)
    if ungauged == "donor":
        _fill_from_donors(table, subbasins, network, nearest, depth_of)
    table["recharge_m3_per_year"] = table["recharge_mm_per_year"] * table["area_km2"] * 1e3
    return table[
        [
            "downstream_gauge",
            "recharge_mm_per_year",
            "recharge_m3_per_year",
            "estimate_source",
            "area_km2",
        ]
    ]


def _fill_from_donors(table, subbasins, network, nearest, depth_of):
    """Give each subbasin without a gauge downstream the depth of the nearest gauged one."""
    from pyproj import CRS

    crs = CRS(subbasins.crs)
    points = subbasins.geometry.representative_point().to_crs(crs.geodetic_crs)
    geod = crs.get_geod()
    lon = np.array([p.x if p is not None else np.nan for p in points])
    lat = np.array([p.y if p is not None else np.nan for p in points])
    gauged = [
        row
        for row, sid in enumerate(network.ids)
        if sid in nearest and np.isfinite(depth_of.get(nearest[sid], np.nan))
    ]
    if not gauged:
        return
    for row, sid in enumerate(network.ids):
        if sid in nearest or not np.isfinite(lon[row]):
            continue
        _, _, distance = geod.inv(
            np.full(len(gauged), lon[row]), np.full(len(gauged), lat[row]), lon[gauged], lat[gauged]
        )
        best = gauged[int(np.argmin(distance))]
        gid = nearest[network.ids[best]]
        table.loc[row, "recharge_mm_per_year"] = depth_of[gid]
        table.loc[row, "estimate_source"] = (
            f"donor: gauge {gid} (nearest gauged subbasin {network.ids[best]}, {np.min(distance) / 1000:.0f} km)"
        )
