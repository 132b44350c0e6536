"""A plain discharge table on disk is read by the core (as the command line reads it), any
other source through QGIS; both give the command line's numbers."""

from __future__ import annotations

import math
import shutil

import pytest

pytest.importorskip("qgis.core")

from qgis.core import (  # noqa: E402
    QgsProcessingFeatureSourceDefinition,
    QgsProcessingFeedback,
    QgsVectorLayer,
)
from support_qgis import SAMPLE, sample_parameters  # noqa: E402

ALGORITHM = "recharge_atlas:catchmentrecharge"
DIRECT = "read from its file"


class Log(QgsProcessingFeedback):
    """Keeps what the run says."""

    def __init__(self):
        super().__init__()
        self.lines = []

    def pushInfo(self, text):  # noqa: N802 (QGIS API name)
        self.lines.append(text)
        super().pushInfo(text)


def _csv_uri(path, options):
    return f"file://{path}?{options}"


def _source(kind, tmp_path):
    """The demo discharge table as the DISCHARGE value of kind ``kind``."""
    path = tmp_path / "discharge.csv"
    shutil.copy(SAMPLE / "discharge.csv", path)
    if kind == "path":
        return str(path)
    if kind == "delimited text":  # as QGIS's dialog adds a CSV without geometry
        options = "encoding=UTF-8&type=csv&delimiter=,&maxFields=10000&detectTypes=yes&geomType=none&subsetIndex=no&watchFile=no"
        return QgsVectorLayer(_csv_uri(path, options), "discharge", "delimitedtext")
    if kind == "trimmed delimited text":  # an option that may change values: QGIS reads it
        options = "type=csv&delimiter=,&detectTypes=yes&geomType=none&trimFields=yes"
        return QgsVectorLayer(_csv_uri(path, options), "discharge", "delimitedtext")
    if kind == "filtered":
        layer = QgsVectorLayer(str(path), "discharge", "ogr")
        layer.setSubsetString("gauge_id IS NOT NULL")
        return layer
    if kind == "selected":
        layer = QgsVectorLayer(str(path), "discharge", "ogr")
        from qgis.core import QgsProject

        QgsProject.instance().addMapLayer(layer)
        layer.selectAll()
        return QgsProcessingFeatureSourceDefinition(layer.id(), True)
    raise AssertionError(kind)


@pytest.mark.parametrize(
    "kind, direct",
    [
        ("path", True),
        ("delimited text", True),
        ("trimmed delimited text", False),
        ("filtered", False),
        ("selected", False),
    ],
)
def test_discharge_read_either_way_gives_the_command_lines_numbers(
    qgis_app, core_result, tmp_path, kind, direct
):
    import processing

    log = Log()
    results = processing.run(
        ALGORITHM,
        sample_parameters(DISCHARGE=_source(kind, tmp_path), OUTPUT="TEMPORARY_OUTPUT"),
        feedback=log,
    )
    assert any(DIRECT in line for line in log.lines) == direct, log.lines
    expected = core_result.catchments.set_index("name")
    layer = results["OUTPUT"]
    names = layer.fields().names()
    for feature in layer.getFeatures():
        row = dict(zip(names, feature.attributes()))
        want = expected.loc[row["name"]]
        for name in ("recharge_mm_per_year", "recession_index_days", "baseflow_index"):
            got, wanted = _number(row[name]), float(want[name])
            if math.isnan(wanted):
                assert math.isnan(got), (name, got)
            elif direct:  # the command line's own reader: the very same numbers
                assert got == wanted, (name, got, wanted)
            else:  # QGIS's values (typed or text): the same to rounding
                assert math.isclose(got, wanted, rel_tol=1e-9), (name, got, wanted)


def _number(value):
    """A QGIS attribute as float, NaN for NULL."""
    try:
        return float(value)
    except (TypeError, ValueError):
        return math.nan


@pytest.mark.parametrize(
    "options, readable",
    [
        ("type=csv&delimiter=,&detectTypes=yes&geomType=none", True),
        ("delimiter=,", True),
        ("type=csv", True),
        ("type=csv&delimiter=%5Ct", False),  # a tab, but the file is comma-separated
        ("type=csv&delimiter=;", False),
        ("type=csv&decimalPoint=,", False),
        ("type=csv&skipLines=2", False),
        ("type=csv&useHeader=no", False),
        ("type=csv&encoding=System", False),
        ("type=regexp&delimiter=%5Cs+", False),
        ("type=csv&xField=x&yField=y", False),
        ("type=csv&somethingNew=1", False),
    ],
)
def test_delimited_text_options_that_may_change_values_send_the_table_through_qgis(
    qgis_app, tmp_path, options, readable
):
    from recharge_atlas.plugin.direct_read import _delimited_text_file

    path = tmp_path / "discharge.csv"
    shutil.copy(SAMPLE / "discharge.csv", path)
    assert (_delimited_text_file(_csv_uri(path, options)) == path) is readable


def test_tab_separated_tables_are_read_directly_with_a_tab_delimiter(qgis_app, tmp_path):
    from recharge_atlas.plugin.direct_read import _delimited_text_file

    path = tmp_path / "discharge.tsv"
    path.write_text("gauge_id\tdate\tdischarge\nQM01\t2000-10-01\t4.5\n")
    assert _delimited_text_file(_csv_uri(path, "type=csv&delimiter=%5Ct")) == path
    assert _delimited_text_file(_csv_uri(path, "type=csv&delimiter=%09")) == path


@pytest.mark.parametrize(
    "suffix, readable",
    [
        ("", True),
        ("|layername=discharge", True),
        ("|layerid=0", True),
        ("|layername=other", False),
        ("|subset=gauge_id = 'QM01'", False),
        ("|option:AUTODETECT_TYPE=YES", False),
    ],
)
def test_ogr_sources_other_than_the_whole_file_go_through_qgis(
    qgis_app, tmp_path, suffix, readable
):
    from recharge_atlas.plugin.direct_read import _ogr_file

    path = tmp_path / "discharge.csv"
    assert (_ogr_file(f"{path}{suffix}") == path) is readable
    assert _ogr_file(f"{tmp_path / 'discharge.gpkg'}|layername=discharge") is None


def test_memory_layers_and_unsaved_edits_go_through_qgis(qgis_app, tmp_path):
    from qgis.core import QgsFeatureRequest

    from recharge_atlas.plugin.direct_read import discharge_file

    path = tmp_path / "discharge.csv"
    shutil.copy(SAMPLE / "discharge.csv", path)
    layer = QgsVectorLayer(str(path), "discharge", "ogr")
    assert discharge_file(layer, str(path)) == path
    memory = layer.materialize(QgsFeatureRequest())
    assert discharge_file(memory, memory.id()) is None
    assert layer.startEditing()
    feature = next(layer.getFeatures())
    layer.changeAttributeValue(feature.id(), layer.fields().lookupField("discharge"), "0.5")
    assert layer.isModified()
    assert discharge_file(layer, str(path)) is None  # QGIS shows the edit; the file lacks it
    layer.rollBack()


def test_a_table_the_core_reads_otherwise_than_qgis_counts_goes_through_qgis(qgis_app, tmp_path):
    from recharge_atlas.plugin.direct_read import read_discharge

    path = tmp_path / "discharge.csv"
    path.write_text("gauge_id,date,discharge\nQM01,2000-10-01,4.5\nQM01,2000-10-02,4.4\n")
    wanted = ["gauge_id", "date", "discharge"]
    assert len(read_discharge(path, wanted, 2)) == 2
    assert len(read_discharge(path, wanted, -1)) == 2  # QGIS does not know the count
    assert read_discharge(path, wanted, 3) is None
    assert read_discharge(path, ["gauge_id", "flow"], 2) is None


@pytest.mark.parametrize(
    "text, rows",
    [
        ("gauge_id,date,discharge\nQM01,2000-10-01,4.5\nQM01,2000-10-02,4.4\n", 2),
        ("gauge_id,date,discharge\r\nQM01,2000-10-01,4.5\r\nQM01,2000-10-02,4.4", 2),
        ("gauge_id,date,discharge\n", 0),
        ("gauge_id;date;discharge\nQM01;2000-10-01;4,5\n", 1),
        ('gauge_id,date,discharge\n"QM01",2000-10-01,4.5\n', None),  # quotes: QGIS counts
        ("gauge_id,date,discharge\nQM01,2000-10-01,4.5\n\nQM01,2000-10-02,4.4\n", None),
        ("gauge_id,date,discharge\nQM01,2000-10-01,4.5\n \n", None),  # a blank line
        ("\ngauge_id,date,discharge\nQM01,2000-10-01,4.5\n", None),
        ("gauge_id,date,discharge\rQM01,2000-10-01,4.5\r", None),  # old Mac line ends
        ("", None),
    ],
)
def test_rows_counted_from_lines_only_when_each_line_is_a_row(tmp_path, text, rows):
    from recharge_atlas.plugin.direct_read import plain_text_rows

    path = tmp_path / "discharge.csv"
    path.write_bytes(text.encode("utf-8"))
    assert plain_text_rows(path) == rows
    assert plain_text_rows(path, chunk=7) == rows  # a line end or blank line across two reads
    assert plain_text_rows(tmp_path / "absent.csv") is None


def test_qgis_counts_the_features_only_when_the_lines_cannot_tell(qgis_app, tmp_path):
    from recharge_atlas.plugin.direct_read import read_discharge

    wanted = ["gauge_id", "date", "discharge"]
    asked = []

    def count(rows):
        return lambda: asked.append(rows) or rows

    plain = tmp_path / "plain.csv"
    plain.write_text("gauge_id,date,discharge\nQM01,2000-10-01,4.5\nQM01,2000-10-02,4.4\n")
    assert len(read_discharge(plain, wanted, count(2))) == 2 and asked == []
    quoted = tmp_path / "quoted.csv"
    quoted.write_text('gauge_id,date,discharge\n"QM01",2000-10-01,4.5\n"QM01",2000-10-02,4.4\n')
    assert len(read_discharge(quoted, wanted, count(2))) == 2 and asked == [2]
    assert read_discharge(quoted, wanted, count(3)) is None  # QGIS sees another count
    assert plain.read_text().count("\n") == 3  # the file is left as it was
