"""catchmentrecharge's advanced parameters and table outputs inside real QGIS: the same numbers
as the core pipeline for the same Settings, every table with its fields, and clear errors for
bad values."""

from __future__ import annotations

import pytest

pytest.importorskip("qgis.core")

from qgis.core import (  # noqa: E402
    QgsProcessingContext,
    QgsProcessingException,
    QgsProcessingFeedback,
    QgsVectorLayer,
)
from support_qgis import (  # noqa: E402
    GIVEN_K,
    assert_catchments_are,
    assert_table_is,
    gpkg_layer,
    is_null,
    sample_parameters,
    write_gauges_copy,
)

ALGORITHM = "recharge_atlas:catchmentrecharge"
TABLES = ("ANNUAL", "EVENTS", "PERIODS", "SEGMENTS", "MASTER_RECESSION", "DAILY")

#: A given K, a fixed runoff-end lag, Lyne-Hollick by its label and seasons; QM01 takes its K
#: from the gauges' field (GIVEN_K). test_qgis_process runs the same through qgis_process.
GIVEN_K_PARAMETERS = {
    "RECESSION_INDEX": 45,
    "RECESSION_INDEX_FIELD": "k_days",
    "RUNOFF_END_LAG": 4,
    "BASEFLOW_METHOD": "Lyne-Hollick filter",
    "PERIOD": "season",
}
GIVEN_K_SETTINGS = {
    "recession_index_days": 45.0,
    "recession_index_field": "k_days",
    "runoff_end_lag_days": 4.0,
    "baseflow_method": "lyne_hollick",
    "period": "season",
}
#: Quality codes, Eckhardt by its core id with another BFImax, longer segments.
FLAGGED_PARAMETERS = {
    "FLAG_FIELD": "code",
    "FLAG_VALUES": "poor, ice",
    "BASEFLOW_METHOD": "eckhardt",
    "BFI_MAX": 0.5,
    "MIN_SEGMENT_DAYS": 10,
}
FLAGGED_SETTINGS = {
    "flag_field": "code",
    "flag_values": "poor, ice",
    "baseflow_method": "eckhardt",
    "bfi_max": 0.5,
    "min_segment_days": 10,
}


def _layer(path, table):
    layer = QgsVectorLayer(f"{path}|layername={table}", table, "ogr")
    assert layer.isValid(), f"{table} missing from {path}"
    return layer


def _run(tmp_path_factory, name, **changes):
    import processing

    out = tmp_path_factory.mktemp(name) / f"{name}.gpkg"
    parameters = sample_parameters(
        OUTPUT=gpkg_layer(out, "catchments", geometry=True),
        **{table: gpkg_layer(out, table.lower()) for table in TABLES},
    )
    parameters.update(changes)
    results = processing.run(ALGORITHM, parameters)
    return {"path": out, "results": results}


@pytest.fixture(scope="module")
def given_k_run(qgis_app, tmp_path_factory, gauges_with_k):
    return _run(
        tmp_path_factory, "given_k", GAUGES=str(gauges_with_k), DAILY=None, **GIVEN_K_PARAMETERS
    )


@pytest.fixture(scope="module")
def given_k_core(core_run, gauges_with_k):
    return core_run(gauges=gauges_with_k, **GIVEN_K_SETTINGS)


@pytest.fixture(scope="module")
def flagged_run(qgis_app, tmp_path_factory, flagged_discharge):
    return _run(
        tmp_path_factory,
        "flagged",
        DISCHARGE=str(flagged_discharge),
        ANNUAL=None,
        PERIODS=None,
        **FLAGGED_PARAMETERS,
    )


@pytest.fixture(scope="module")
def flagged_core(core_run, flagged_discharge):
    return core_run(discharge=flagged_discharge, **FLAGGED_SETTINGS)


# --------------------------------------------------------------------------- same numbers


def test_given_recession_index_gives_the_cores_numbers(given_k_run, given_k_core):
    path = given_k_run["path"]
    assert_catchments_are(_layer(path, "catchments"), given_k_core)
    assert_table_is(_layer(path, "annual"), given_k_core.annual, "annual")
    assert_table_is(_layer(path, "events"), given_k_core.events, "events")
    assert_table_is(_layer(path, "periods"), given_k_core.periods, "periods")


def test_given_recession_index_is_used_field_first(given_k_run):
    rows = {f["gauge_id"]: f for f in _layer(given_k_run["path"], "catchments").getFeatures()}
    for gauge in ("QM01", "QM02", "TB06"):
        want = GIVEN_K.get(gauge, 45.0)
        assert float(rows[gauge]["recession_index_days"]) == want, gauge
        assert float(rows[gauge]["critical_time_days"]) == pytest.approx(0.2144 * want)
        assert float(rows[gauge]["runoff_end_lag_days"]) == 4.0
        assert is_null(rows[gauge]["recession_index_low"]), "a given K has no interval"
        assert is_null(rows[gauge]["recharge_mm_per_year_low"])


def test_periods_are_seasons(given_k_run):
    periods = {f["period"] for f in _layer(given_k_run["path"], "periods").getFeatures()}
    assert periods == {"Dec-Feb", "Mar-May", "Jun-Aug", "Sep-Nov"}


def test_given_recession_index_keeps_the_diagnostic_tables(given_k_run, given_k_core):
    """With K given, the record's segments and flow levels are still written, as diagnostics."""
    path = given_k_run["path"]
    assert len(given_k_core.segments) > 0
    assert_table_is(_layer(path, "segments"), given_k_core.segments, "segments")
    assert_table_is(
        _layer(path, "master_recession"), given_k_core.master_recession, "master_recession"
    )
    assert "DAILY" not in given_k_run["results"] or not given_k_run["results"]["DAILY"]


@pytest.mark.parametrize("name", TABLES)
def test_a_table_without_rows_keeps_its_fields(qgis_app, name):
    """When no gauge gives a table rows the core returns the gauge id alone; the output still
    gets every field, with its type, so a model can chain it."""
    import pandas as pd

    from recharge_atlas.plugin.conversion import frame_fields, qgs_field
    from recharge_atlas.plugin.sink_writing import _with_fields, table_fields

    fields, rows = frame_fields(_with_fields(pd.DataFrame({"gauge_id": []}), name))
    assert rows == []
    want = table_fields(name)
    assert fields.names() == [field for field, _kind in want]
    for field, kind in want:
        assert fields.field(field).type() == qgs_field(field, kind).type(), (name, field)


def test_quality_codes_give_the_cores_numbers(flagged_run, flagged_core):
    path = flagged_run["path"]
    assert_catchments_are(_layer(path, "catchments"), flagged_core)
    assert_table_is(_layer(path, "events"), flagged_core.events, "events")
    assert_table_is(_layer(path, "segments"), flagged_core.segments, "segments")
    assert_table_is(
        _layer(path, "master_recession"), flagged_core.master_recession, "master_recession"
    )
    assert_table_is(_layer(path, "daily"), flagged_core.daily(), "daily")
    assert set(flagged_run["results"]) == {
        "OUTPUT",
        "EVENTS",
        "SEGMENTS",
        "MASTER_RECESSION",
        "DAILY",
    }


def test_quality_codes_change_the_result(flagged_core, core_result):
    """The flagged days matter (else the test above would prove nothing)."""
    flagged = flagged_core.catchments.set_index("name")["recession_index_days"]
    plain = core_result.catchments.set_index("name")["recession_index_days"]
    assert (flagged.dropna() != plain.dropna()).any()
    assert len(flagged_core.segments) != len(core_result.segments)


def test_table_fields_are_the_cores(core_result):
    """The fields given to empty tables are those the core writes (names and types)."""
    from recharge_atlas.plugin.conversion import _kind
    from recharge_atlas.plugin.sink_writing import table_fields

    frames = {
        "ANNUAL": core_result.annual,
        "EVENTS": core_result.events,
        "PERIODS": core_result.periods,
        "SEGMENTS": core_result.segments,
        "MASTER_RECESSION": core_result.master_recession,
        "DAILY": core_result.daily(),
    }
    for name, frame in frames.items():
        assert len(frame), name
        assert table_fields(name) == [(c, _kind(frame[c])) for c in frame.columns], name


# --------------------------------------------------------------------------- values

CHECKS = [
    # (what, changes, accepted, words the message must contain)
    ("method by label", {"BASEFLOW_METHOD": "smoothed minima"}, True, []),
    ("method by core id", {"BASEFLOW_METHOD": "smoothed_minima"}, True, []),
    ("method by index", {"BASEFLOW_METHOD": 1}, True, []),
    ("method by index as text", {"BASEFLOW_METHOD": "1"}, True, []),
    ("units by index as text", {"UNITS": "2"}, True, []),
    ("method by an index too large", {"BASEFLOW_METHOD": "7"}, False, ["'7'"]),
    ("method with an en dash", {"BASEFLOW_METHOD": "Lyne–Hollick filter"}, True, []),
    ("season in capitals", {"PERIOD": "Season"}, True, []),
    ("numbers as text", {"RECESSION_INDEX": "45", "BFI_MAX": "0.25"}, True, []),
    ("empty optional numbers", {"RECESSION_INDEX": "", "RUNOFF_END_LAG": None}, True, []),
    ("BFImax 1.5", {"BFI_MAX": 1.5}, False, ["BFImax was 1.5", "(BFI_MAX)"]),
    ("BFImax 0", {"BFI_MAX": 0}, False, ["BFImax", "(BFI_MAX)"]),
    ("BFImax 1", {"BFI_MAX": 1.0}, False, ["BFImax", "(BFI_MAX)"]),
    ("BFImax text", {"BFI_MAX": "high"}, False, ["'high'", "(BFI_MAX)"]),
    ("segments of 1 day", {"MIN_SEGMENT_DAYS": 1}, False, ["was 1", "(MIN_SEGMENT_DAYS)"]),
    ("segments of 7.5 days", {"MIN_SEGMENT_DAYS": 7.5}, False, ["(MIN_SEGMENT_DAYS)"]),
    ("negative K", {"RECESSION_INDEX": -3}, False, ["-3 is outside", "(RECESSION_INDEX)"]),
    ("zero K", {"RECESSION_INDEX": 0}, False, ["(RECESSION_INDEX)"]),
    ("negative lag", {"RUNOFF_END_LAG": -1}, False, ["(RUNOFF_END_LAG)"]),
    (
        "unknown method",
        {"BASEFLOW_METHOD": "wavelet"},
        False,
        ["'wavelet'", "Eckhardt filter", "lyne_hollick"],
    ),
    ("unknown period", {"PERIOD": "fortnight"}, False, ["'fortnight'", "month", "season"]),
]


@pytest.mark.parametrize("what, changes, accepted, words", CHECKS, ids=[c[0] for c in CHECKS])
def test_check_parameter_values(algorithm, what, changes, accepted, words):
    parameters = sample_parameters(OUTPUT="TEMPORARY_OUTPUT", **changes)
    ok, message = algorithm.checkParameterValues(parameters, QgsProcessingContext())
    assert ok is accepted, message
    for word in words:
        assert word in message


def test_bad_value_stops_the_run_before_anything_is_written(qgis_app, tmp_path):
    import processing

    parameters = sample_parameters(
        OUTPUT=str(tmp_path / "out.gpkg"), DAILY=str(tmp_path / "daily.gpkg"), BFI_MAX=1.5
    )
    with pytest.raises(QgsProcessingException, match=r"BFImax was 1\.5") as caught:
        processing.run(ALGORITHM, parameters, feedback=QgsProcessingFeedback())
    assert "Traceback" not in str(caught.value)
    assert list(tmp_path.iterdir()) == []


def test_negative_recession_index_in_the_field_is_named(qgis_app, tmp_path_factory):
    import processing

    gauges = write_gauges_copy(
        tmp_path_factory.mktemp("bad-k") / "gauges.gpkg", "k_days", {"QM02": -5.0}
    )
    out = tmp_path_factory.mktemp("bad-k-out")
    parameters = sample_parameters(
        GAUGES=str(gauges),
        RECESSION_INDEX_FIELD="k_days",
        OUTPUT=str(out / "out.gpkg"),
        ANNUAL=str(out / "annual.gpkg"),
    )
    with pytest.raises(QgsProcessingException) as caught:
        processing.run(ALGORITHM, parameters, feedback=QgsProcessingFeedback())
    message = str(caught.value)
    for words in ("recession index -5", "is outside 1 to 3,650 days", "'k_days'", "gauge QM02"):
        assert words in message
    assert "Traceback" not in message
    assert list(out.iterdir()) == []


def test_missing_quality_code_field_is_named(qgis_app, tmp_path):
    import processing

    parameters = sample_parameters(OUTPUT=str(tmp_path / "out.gpkg"), FLAG_FIELD="qa_code")
    with pytest.raises(QgsProcessingException, match="qa_code"):
        processing.run(ALGORITHM, parameters, feedback=QgsProcessingFeedback())
    assert list(tmp_path.iterdir()) == []


# --------------------------------------------------------------------------- models


def test_a_table_output_feeds_the_next_step_of_a_model(qgis_app, gauges_with_k, given_k_core):
    """In a model, PERIODS feeds a selection by attribute; the tables nobody uses are not
    written, and the rows that come out are the core's."""
    from qgis.core import (
        QgsProcessingModelAlgorithm,
        QgsProcessingModelChildAlgorithm,
        QgsProcessingModelChildParameterSource,
        QgsProcessingModelOutput,
        QgsProcessingUtils,
    )

    static = QgsProcessingModelChildParameterSource.fromStaticValue
    model = QgsProcessingModelAlgorithm("winter recharge", "tests")
    recharge = QgsProcessingModelChildAlgorithm(ALGORITHM)
    recharge.setChildId("recharge")
    for name, value in sample_parameters(GAUGES=str(gauges_with_k), **GIVEN_K_PARAMETERS).items():
        recharge.addParameterSources(name, [static(value)])
    model.addChildAlgorithm(recharge)
    select = QgsProcessingModelChildAlgorithm("native:extractbyattribute")
    select.setChildId("winter")
    select.addParameterSources(
        "INPUT", [QgsProcessingModelChildParameterSource.fromChildOutput("recharge", "PERIODS")]
    )
    for name, value in (("FIELD", "period"), ("OPERATOR", 0), ("VALUE", "Dec-Feb")):
        select.addParameterSources(name, [static(value)])
    output = QgsProcessingModelOutput("winter", "winter")
    output.setChildId("winter")
    output.setChildOutputName("OUTPUT")
    select.setModelOutputs({"winter": output})
    model.addChildAlgorithm(select)
    model.updateDestinationParameters()

    context = QgsProcessingContext()
    results, ok = model.run({"winter:winter": "TEMPORARY_OUTPUT"}, context, QgsProcessingFeedback())
    assert ok, results
    written = results["CHILD_RESULTS"]["recharge"]
    assert set(written) == {"OUTPUT", "PERIODS"}, "only the outputs the model uses"
    layer = QgsProcessingUtils.mapLayerFromString(results["winter:winter"], context)
    periods = given_k_core.periods
    assert_table_is(layer, periods[periods["period"] == "Dec-Feb"], "winter periods")
