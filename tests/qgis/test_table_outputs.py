"""Table outputs sent to a GeoPackage the run has started are added by the core's own writer:
the command line's columns, types and values, loaded on completion as a sink's would be; any
other destination still gets a QGIS sink (issue 17)."""

from __future__ import annotations

import sqlite3

import pytest

pytest.importorskip("qgis.core")

from qgis.core import (  # noqa: E402
    QgsProcessingContext,
    QgsProcessingOutputLayerDefinition,
    QgsProject,
    QgsVectorLayer,
)
from support_qgis import SAMPLE, assert_table_is, sample_parameters  # noqa: E402

ALGORITHM = "recharge_atlas:catchmentrecharge"


def _columns(path, table):
    with sqlite3.connect(path) as db:
        return [(row[1], row[2]) for row in db.execute(f'pragma table_info("{table}")')]


def _contents(path):
    with sqlite3.connect(path) as db:
        return dict(db.execute("select table_name, data_type from gpkg_contents"))


def _said(log):
    return [text for kind, text in log.lines if kind == "info"]


def test_tables_in_a_started_geopackage_are_the_command_lines(core_result, log_feedback, tmp_path):
    import processing

    from recharge_atlas.cli import main

    cli = tmp_path / "cli.gpkg"
    assert main(["run", "--gauges", str(SAMPLE / "gauges.gpkg"), "--catchments",
                 str(SAMPLE / "catchments.gpkg"), "--discharge", str(SAMPLE / "discharge.csv"),
                 "--out", str(cli)]) == 0  # fmt: skip
    out = tmp_path / "recharge.gpkg"
    project = QgsProject()
    outputs = {}
    for name in ("OUTPUT", "ANNUAL", "EVENTS"):
        definition = QgsProcessingOutputLayerDefinition(str(out), project)
        definition.destinationName = f"shown {name.lower()}"
        outputs[name] = definition
    context = QgsProcessingContext()
    context.setProject(project)
    log = log_feedback()
    results = processing.run(ALGORITHM, sample_parameters(**outputs), context=context, feedback=log)
    said = [line for line in _said(log) if "by the command line's GeoPackage writer" in line]
    assert [line.split(":")[0] for line in said] == ["ANNUAL", "EVENTS"]
    assert results["ANNUAL"] == f"{out}|layername=annual"
    assert results["EVENTS"] == f"{out}|layername=events"
    for table in ("annual", "events"):
        assert _columns(out, table) == _columns(cli, table), table
        assert _contents(out)[table] == "attributes"
    assert_table_is(QgsVectorLayer(results["ANNUAL"], "a", "ogr"), core_result.annual, "annual")
    assert_table_is(QgsVectorLayer(results["EVENTS"], "e", "ogr"), core_result.events, "events")
    # Loaded on completion under the names asked for, as a sink's layer would be.
    for name in ("ANNUAL", "EVENTS"):
        assert context.willLoadLayerOnCompletion(results[name]), name
        details = context.layerToLoadOnCompletionDetails(results[name])
        assert details.name == f"shown {name.lower()}"
        assert details.outputName == name


def test_a_table_to_a_file_of_its_own_still_goes_through_a_sink(
    core_result, log_feedback, tmp_path
):
    import processing

    out, annual = tmp_path / "recharge.gpkg", tmp_path / "annual.gpkg"
    log = log_feedback()
    results = processing.run(
        ALGORITHM,
        sample_parameters(OUTPUT=str(out), ANNUAL=str(annual), EVENTS="memory:"),
        feedback=log,
    )
    assert not [line for line in _said(log) if "GeoPackage writer" in line]
    layer = QgsVectorLayer(results["ANNUAL"], "a", "ogr")
    assert layer.isValid()
    assert_table_is(layer, core_result.annual, "annual")
    events = results["EVENTS"]
    events = events if isinstance(events, QgsVectorLayer) else None
    assert events is None or events.featureCount() == len(core_result.events)


def test_a_full_disk_while_adding_a_table_is_said_in_words(tmp_path, monkeypatch):
    import sqlite3

    import processing
    from qgis.core import QgsProcessingException

    from recharge_atlas.algorithms import geopackage

    def full(*args, **kwargs):
        raise sqlite3.OperationalError("database or disk is full")

    monkeypatch.setattr(geopackage, "add_attribute_table", full)
    out = tmp_path / "recharge.gpkg"
    with pytest.raises(QgsProcessingException) as raised:
        processing.run(ALGORITHM, sample_parameters(OUTPUT=str(out), ANNUAL=str(out)))
    message = str(raised.value)
    assert "while writing the annual table" in message and "internal error" not in message
    assert str(out) in message
