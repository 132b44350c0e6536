"""The choices, units and defaults the algorithms' dialogs show.

Declared here, apart from the core, so the provider can list the algorithms and draw their
dialogs even when the core cannot be imported (pandas, scipy or geopandas missing); tests check
each against the core. Also how a choice given by its label, its core id or its index is read
back as the core's id.
"""

from __future__ import annotations

import re

# Used only when the core cannot be imported (numpy missing), so the dialog can still be drawn;
# tests check that they equal recharge_atlas.algorithms.units.
_UNIT_LABELS = ("m3/s", "L/s", "ft3/s", "ML/d")
_UNIT_ALIASES = {"cfs": "ft3/s"}


def unit_labels():
    """The discharge unit labels and their aliases, from the core when it imports."""
    try:
        from ..algorithms.units import DISCHARGE_UNITS, UNIT_ALIASES
    except ImportError:
        return list(_UNIT_LABELS), dict(_UNIT_ALIASES)
    return list(DISCHARGE_UNITS), dict(UNIT_ALIASES)


# Choices: the core's id and the label the dialog shows. Scripts may pass either (or the
# option's index); tests check the ids against the core.
#: Baseflow separation methods.
BASEFLOW_METHODS = {
    "eckhardt": "Eckhardt filter",
    "lyne_hollick": "Lyne-Hollick filter",
    "smoothed_minima": "smoothed minima",
}
#: How recharge is summed within the water year (the core's ids, shown as they are).
PERIODS = ("month", "season")
_PERIOD_CHOICES = {period: period for period in PERIODS}
#: How gauges find their catchments.
LINK_METHODS = {
    "auto": "auto (by gauge id if the catchments have it; else by location)",
    "id": "by gauge id",
    "spatial": "by location (gauge at the outlet)",
}
#: What subbasins with no gauge downstream get.
UNGAUGED_CHOICES = {
    "donor": "depth of the nearest gauged subbasin",
    "empty": "no estimate",
}
#: How the map's class limits are drawn (the core's schemes).
MAP_CLASSES = {
    "quantiles": "quantiles",
    "equal_interval": "equal interval",
    "natural_breaks": "natural breaks",
}
# Defaults of the core's Settings, declared here so the dialog can be drawn without the core;
# tests check that they equal recharge_atlas.algorithms.pipeline.Settings().
_BFI_MAX = 0.80
_MIN_SEGMENT_DAYS = 7
_LINK_TOLERANCE_M = 100.0
_OVERLAP_TOLERANCE = 0.05
# Of the core's maps: the number of classes of the command line's map, and the most a map may
# have (tests check them).
_CLASS_COUNT = 5
_MAX_CLASSES = 12


def _plain(text) -> str:
    """Lower case, with runs of spaces, hyphens, dashes and underscores as one space."""
    return re.sub(r"[\s_\-\u2010-\u2015]+", " ", str(text).strip().lower()).strip()


def choice_id(value, choices):
    """The core id of a choice given by its label or its id (None when unknown).

    >>> choice_id("Lyne-Hollick filter", BASEFLOW_METHODS), choice_id("natural breaks", MAP_CLASSES)
    ('lyne_hollick', 'natural_breaks')
    """
    key = _plain(value)
    for core_id, label in choices.items():
        if key in (_plain(core_id), _plain(label)):
            return core_id
    return None


def baseflow_method_id(value):
    """The core id of a baseflow method given by its label or its id (None when unknown).

    >>> baseflow_method_id("Lyne-Hollick filter"), baseflow_method_id("smoothed_minima")
    ('lyne_hollick', 'smoothed_minima')
    """
    return choice_id(value, BASEFLOW_METHODS)


def _option_text(value, options):
    """An enum value given as an index (a number, or digits as ``qgis_process`` passes it)
    read as its option's text; other values unchanged. No option is a number, so digits can
    only mean an index."""
    index = int(value.strip()) if isinstance(value, str) and value.strip().isdigit() else value
    if isinstance(index, int) and not isinstance(index, bool) and 0 <= index < len(options):
        return options[index]
    return value
