"""Unit conversions for discharge, area and depth.

Constants are exact by definition, from NIST Special Publication 811 (2008), Appendix B:
1 ft = 0.3048 m exactly, so 1 ft³ = 0.028316846592 m³; 1 mi = 1609.344 m, so
1 mi² = 2.589988110336 km²; 1 in = 25.4 mm.
"""

from __future__ import annotations

import numpy as np

from .errors import InputError

#: 1 ft³ in m³ (NIST SP 811: 0.3048³, exact).
CUBIC_FOOT_M3 = 0.028316846592
#: 1 mi² in km² (NIST SP 811: 1.609344², exact).
SQUARE_MILE_KM2 = 2.589988110336
#: 1 in in mm (NIST SP 811, exact).
INCH_MM = 25.4
#: Seconds in a day.
SECONDS_PER_DAY = 86400.0

#: Discharge units accepted everywhere (CLI choices, QGIS enum labels), with their factor to m³/s.
DISCHARGE_UNITS = {
    "m3/s": 1.0,
    "L/s": 1.0e-3,
    "ft3/s": CUBIC_FOOT_M3,
    "ML/d": 1.0e3 / SECONDS_PER_DAY,  # 1 ML = 1000 m³
}
#: Other spellings accepted for the same units.
UNIT_ALIASES = {"cfs": "ft3/s"}


def canonical_units(units: str) -> str:
    """Return the canonical label for a discharge unit label (``cfs`` becomes ``ft3/s``).

    Raises
    ------
    InputError
        If the label is not a known discharge unit.
    """
    label = str(units).strip()
    label = UNIT_ALIASES.get(label, label)
    if label not in DISCHARGE_UNITS:
        allowed = sorted(DISCHARGE_UNITS) + sorted(UNIT_ALIASES)
        raise InputError(f"units was {units!r}; expected one of {allowed}")
    return label


def to_cubic_metres_per_second(values, units: str) -> np.ndarray:
    """Convert discharge values in ``units`` to m³/s.

    Examples
    --------
    >>> float(to_cubic_metres_per_second([1.0], "cfs")[0])
    0.028316846592
    """
    factor = DISCHARGE_UNITS[canonical_units(units)]
    return np.asarray(values, dtype=float) * factor
