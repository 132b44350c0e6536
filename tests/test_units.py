"""Unit constants and conversions, checked against NIST SP 811 (2008), Appendix B."""

import numpy as np
import pytest

from recharge_atlas.algorithms.errors import InputError
from recharge_atlas.algorithms.units import (
    CUBIC_FOOT_M3,
    DISCHARGE_UNITS,
    INCH_MM,
    SQUARE_MILE_KM2,
    canonical_units,
    to_cubic_metres_per_second,
)


def test_nist_exact_constants():
    # NIST SP 811: 1 ft = 0.3048 m exactly and 1 mi = 1609.344 m exactly, so the cube and the
    # square are exact too; 1 in = 2.54 cm exactly.
    assert CUBIC_FOOT_M3 == pytest.approx(0.3048**3, rel=1e-15)
    assert CUBIC_FOOT_M3 == 0.028316846592
    assert SQUARE_MILE_KM2 == pytest.approx(1.609344**2, rel=1e-15)
    assert SQUARE_MILE_KM2 == 2.589988110336
    assert INCH_MM == 25.4


@pytest.mark.parametrize(
    ("label", "value", "expected_m3s"),
    [
        ("m3/s", 2.0, 2.0),
        ("L/s", 1500.0, 1.5),
        ("ft3/s", 100.0, 2.8316846592),  # NIST SP 811: 1 ft³/s = 0.028316846592 m³/s
        ("cfs", 100.0, 2.8316846592),
        ("ML/d", 86.4, 1.0),  # 86.4 ML/d = 86 400 m³/d = 1 m³/s (1 ML = 1000 m³)
    ],
)
def test_conversion_to_cubic_metres_per_second(label, value, expected_m3s):
    assert to_cubic_metres_per_second([value], label)[0] == pytest.approx(expected_m3s, rel=1e-12)


def test_aliases_resolve_and_labels_are_stable():
    assert canonical_units("cfs") == "ft3/s"
    assert list(DISCHARGE_UNITS) == ["m3/s", "L/s", "ft3/s", "ML/d"]


def test_unknown_units_name_the_value_and_the_choices():
    with pytest.raises(InputError, match=r"units was 'gallons'.*expected one of"):
        canonical_units("gallons")


def test_conversion_keeps_missing_values_missing():
    out = to_cubic_metres_per_second([1.0, np.nan], "L/s")
    assert out[0] == 1e-3 and np.isnan(out[1])
