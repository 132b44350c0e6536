"""Everything a run can be told (:class:`Settings`), and the checks of each value.

Field names, units, the water year, the method's options, linking and nesting tolerances,
workers. :meth:`Settings.resolved` fills defaults and raises :class:`InputError` for a value a
run cannot take, before any file is read.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, replace

from .baseflow import BFIMAX_TYPICAL, METHODS
from .basins import LINK_TOLERANCE_M
from .discharge import MIN_DAY_COVERAGE
from .errors import InputError, quoted
from .nesting import OVERLAP_TOLERANCE
from .subbasins import UNGAUGED_CHOICES
from .units import canonical_units

#: How gauges link to catchments.
LINK_METHODS = ("auto", "id", "spatial")


@dataclass
class Settings:
    """Everything a run can be told. Defaults suit a daily record in m³/s.

    Attributes
    ----------
    units : str
        Discharge units: ``m3/s``, ``L/s``, ``ft3/s`` (alias ``cfs``) or ``ML/d``.
    water_year_start : int
        First month of the water year (10 = October).
    gauge_id_field : str
        Gauge id field of the gauges layer.
    discharge_gauge_field, date_field, value_field : str
        Fields of the discharge table (the gauge field defaults to ``gauge_id_field``).
    catchment_gauge_field : str
        Field of the catchments layer holding the gauge id (defaults to ``gauge_id_field``).
    flag_field : str or None
        Quality-code field of the discharge table; flagged days are not used by the method.
    flag_values : list of str or None
        Codes that flag a day (None: any non-empty code).
    min_day_coverage : float
        Share of a day's sub-daily values needed for its daily mean.
    runoff_end_lag_days : float or None
        Days after a peak when surface runoff has ended; None derives it from the area.
    min_segment_days : int
        Shortest recession segment used for the recession index.
    recession_index_days : float or None
        Use this K for every gauge instead of estimating it.
    recession_index_field : str or None
        Field of the gauges layer giving K per gauge (empty values: estimate).
    baseflow_method : str
        ``eckhardt`` (default), ``lyne_hollick`` or ``smoothed_minima``.
    bfi_max : float
        BFImax of the Eckhardt filter (0.80 perennial/porous, 0.50 ephemeral/porous,
        0.25 perennial/hard rock; Eckhardt 2005).
    period : str
        Sub-annual sums: ``month`` or ``season``.
    min_complete_years : int
        Fewer complete water years than this is flagged in ``quality``.
    link : str
        ``auto`` (by the id field when the catchments have it, else spatially), ``id`` or
        ``spatial``.
    link_tolerance_m : float
        Spatial linking: how far (m) a gauge may lie from its catchment's boundary.
    overlap_tolerance : float
        Nesting: share of a basin that may lie outside a larger basin that contains it.
    reported_area_field : str or None
        Field of the gauges layer with a reported drainage area (km²); a mismatch of more than
        10 % with the computed area is flagged.
    precipitation_field : str or None
        Field of the catchments layer with mean annual precipitation (mm/yr). The catchments
        then get ``precipitation_mm_per_year`` and ``recharge_share_of_precipitation``; a share
        above 1 is flagged. (A precipitation raster is read into such a field first, by QGIS's
        zonal statistics or :mod:`precipitation`.)
    ungauged : str
        Subbasin maps: ``donor`` (borrow the nearest gauged depth, said in ``estimate_source``)
        or ``empty``.
    subbasin_id_field, downstream_field : str
        Subbasin maps: the subbasins' id field and the field naming the subbasin each drains into.
    workers : int
        Processes that share the gauges (1: this process only). Results are identical.
    dask_scheduler : str or None
        Address of a Dask distributed scheduler to send the gauges to instead.
    """

    units: str = "m3/s"
    water_year_start: int = 10
    gauge_id_field: str = "gauge_id"
    discharge_gauge_field: str | None = None
    date_field: str = "date"
    value_field: str = "discharge"
    catchment_gauge_field: str | None = None
    flag_field: str | None = None
    flag_values: list | None = None
    min_day_coverage: float = MIN_DAY_COVERAGE
    runoff_end_lag_days: float | None = None
    min_segment_days: int = 7
    recession_index_days: float | None = None
    recession_index_field: str | None = None
    baseflow_method: str = "eckhardt"
    bfi_max: float = BFIMAX_TYPICAL["perennial stream, porous aquifer"]
    period: str = "month"
    min_complete_years: int = 5
    link: str = "auto"
    link_tolerance_m: float = LINK_TOLERANCE_M
    overlap_tolerance: float = OVERLAP_TOLERANCE
    reported_area_field: str | None = None
    precipitation_field: str | None = None
    ungauged: str = "donor"
    subbasin_id_field: str = "subbasin_id"
    downstream_field: str = "downstream_id"
    workers: int = 1
    dask_scheduler: str | None = None
    catchment_field_given: bool | None = None

    def resolved(self) -> Settings:
        """A copy with defaults filled in and values checked (raises :class:`InputError`)."""
        units = canonical_units(self.units)
        month = _whole_number(self.water_year_start)
        if month is None or not 1 <= month <= 12:
            raise InputError(
                f"water year start was {self.water_year_start!r}; expected a month number 1 to 12"
            )
        if self.recession_index_days is not None:
            check_recession_index(self.recession_index_days)
        lag = self.runoff_end_lag_days
        if lag is not None and not (_positive(lag) and float(lag) <= MAX_RUNOFF_END_LAG_DAYS):
            raise InputError(
                f"runoff end lag was {lag!r}; expected a number of days above 0 and at most "
                f"{MAX_RUNOFF_END_LAG_DAYS:g} (runoff that lasts longer leaves no recession)"
            )
        min_days = _whole_number(self.min_segment_days)
        if min_days is None or not 2 <= min_days <= MAX_SEGMENT_DAYS:
            raise InputError(
                f"minimum segment length was {self.min_segment_days!r}; expected a whole "
                f"number of days from 2 to {MAX_SEGMENT_DAYS} (a fit needs two days; no "
                "recession lasts a year without a rise)"
            )
        if self.baseflow_method not in METHODS:
            raise InputError(
                f"baseflow method was {self.baseflow_method!r}; expected one of {list(METHODS)}"
            )
        if not (_positive(self.bfi_max) and float(self.bfi_max) < 1.0):
            raise InputError(f"BFImax was {self.bfi_max!r}; expected a number between 0 and 1")
        try:
            coverage = float(self.min_day_coverage)
        except (TypeError, ValueError):
            coverage = math.nan
        if not 0.0 <= coverage <= 1.0:
            raise InputError(
                f"minimum day coverage was {self.min_day_coverage!r}; expected a share between 0 and 1"
            )
        if self.period not in ("month", "season"):
            raise InputError(f"period was {self.period!r}; expected 'month' or 'season'")
        if self.link not in LINK_METHODS:
            raise InputError(f"link was {self.link!r}; expected one of {list(LINK_METHODS)}")
        try:
            tolerance = float(self.link_tolerance_m)
        except (TypeError, ValueError):
            tolerance = math.nan
        if not (math.isfinite(tolerance) and tolerance >= 0):
            raise InputError(
                f"link tolerance was {self.link_tolerance_m!r}; expected a distance in metres, 0 or more"
            )
        try:
            overlap = float(self.overlap_tolerance)
        except (TypeError, ValueError):
            overlap = math.nan
        if not 0.0 <= overlap < 0.5:
            raise InputError(
                f"overlap tolerance was {self.overlap_tolerance!r}; expected a share from 0 to 0.5"
            )
        workers = _whole_number(self.workers)
        if workers is None or workers < 1:
            raise InputError(f"workers was {self.workers!r}; expected a whole number, 1 or more")
        if self.ungauged not in UNGAUGED_CHOICES:
            raise InputError(
                f"ungauged was {self.ungauged!r}; expected one of {list(UNGAUGED_CHOICES)}"
            )
        flags = self.flag_values
        if isinstance(flags, str):
            flags = [v.strip() for v in flags.split(",") if v.strip()] or None
        return replace(
            self,
            units=units,
            water_year_start=month,
            min_segment_days=min_days,
            discharge_gauge_field=self.discharge_gauge_field or self.gauge_id_field,
            catchment_gauge_field=self.catchment_gauge_field or self.gauge_id_field,
            catchment_field_given=(
                self.catchment_field_given
                if self.catchment_field_given is not None
                else bool(self.catchment_gauge_field)
            ),
            link_tolerance_m=tolerance,
            overlap_tolerance=overlap,
            reported_area_field=self.reported_area_field or None,
            precipitation_field=self.precipitation_field or None,
            workers=workers,
            dask_scheduler=self.dask_scheduler or None,
            flag_field=self.flag_field or None,
            flag_values=flags,
            recession_index_field=self.recession_index_field or None,
        )

    def link_method(self, catchment_columns) -> str:
        """``id`` or ``spatial`` for these catchments (``auto`` decides by the columns)."""
        if self.link != "auto":
            return self.link
        if (
            self.catchment_field_given
            or (self.catchment_gauge_field or self.gauge_id_field) in catchment_columns
        ):
            return "id"
        return "spatial"


#: The recession indexes (days per log cycle) a run accepts when given: a tenfold fall within
#: a day cannot be seen in daily means (and Tc = 0.2144 K would fall inside the peak's day), and
#: one slower than ten years cannot be seen in any record (our own bounds; measured indexes of
#: perennial streams lie well inside, commonly tens to a few hundred days).
RECESSION_INDEX_RANGE = (1.0, 3650.0)


#: The longest runoff-end lag (days) and shortest-segment setting a run accepts (our own bounds).
MAX_RUNOFF_END_LAG_DAYS = 365.0


MAX_SEGMENT_DAYS = 365


def check_recession_index(value, **where) -> float:
    """``value`` as a float when it is a recession index a run accepts
    (:data:`RECESSION_INDEX_RANGE`); else :class:`InputError` saying the range and why,
    located by ``where`` (``field=``, ``gauge=``)."""
    low, high = RECESSION_INDEX_RANGE
    try:
        number = float(value)
    except (TypeError, ValueError):
        number = math.nan
    if not low <= number <= high:
        shown = f"{number:g}" if math.isfinite(number) else quoted(value)
        raise InputError(
            f"recession index {shown} is outside {low:g} to {high:,.0f} days per log cycle: "
            "a faster fall cannot be seen in daily means, a slower one in any record",
            **where,
        )
    return number


#: The settings that name a field, by the layer or table that must hold it.
FIELD_SETTINGS = {
    "gauges layer": ("gauge_id_field", "recession_index_field", "reported_area_field"),
    "discharge table": ("discharge_gauge_field", "date_field", "value_field", "flag_field"),
    "catchments layer": ("catchment_gauge_field", "precipitation_field"),
    "subbasins layer": ("subbasin_id_field", "downstream_field"),
}


def field_setting(missing_field, settings) -> str | None:
    """The :class:`Settings` attribute that named a field missing from a layer
    (``InputError.missing_field``: what, field), or None when none did."""
    if not missing_field or settings is None:
        return None
    what, name = missing_field
    for attribute in FIELD_SETTINGS.get(what, ()):
        if getattr(settings, attribute, None) == name:
            return attribute
    return None


def _whole_number(value):
    try:
        number = float(value)
    except (TypeError, ValueError):
        return None
    return int(number) if math.isfinite(number) and number == int(number) else None


def _positive(value):
    try:
        number = float(value)
    except (TypeError, ValueError):
        return False
    return math.isfinite(number) and number > 0
