"""Bad inputs inside real QGIS (issue 7): the same words as the command line, inputs untouched,
nothing written.

Each case spoils a copy of the small invented region of ``messy_region`` and runs it twice:
through the command line (in this process) and through ``processing.run``. An error must be a
``QgsProcessingException`` whose text holds the command line's message (each shell then says
where in its own terms: the file on the command line, the parameter in QGIS); a flagged gauge
must carry the same ``quality`` in both outputs.
"""

from __future__ import annotations

import re
import shutil

import pandas as pd
import pytest

pytest.importorskip("qgis.core")

from messy_region import digests, write_region  # noqa: E402
from qgis.core import (  # noqa: E402
    QgsProcessingException,
    QgsProcessingFeedback,
    QgsVectorLayer,
)

from recharge_atlas.algorithms import pipeline  # noqa: E402
from recharge_atlas.cli import main  # noqa: E402

ALGORITHM = "recharge_atlas:catchmentrecharge"
_WHERE = re.compile(r" \((?:(?:file|field|gauge) [^()]*|row \d+|[A-Z_]+)\)$")
#: The command line names the option that gave a missing field; QGIS names the parameter.
_OPTION = re.compile(r"; name the right field with --[a-z-]+")


def _core(text: str) -> str:
    """A message without the shell's prefix and the places it names at the end."""
    text = text.strip().removeprefix("recharge-atlas: error: ")
    while _WHERE.search(text):
        text = _WHERE.sub("", text)
    return _OPTION.sub("", text)


@pytest.fixture(scope="module")
def region(tmp_path_factory):
    return write_region(tmp_path_factory.mktemp("messy") / "in")


@pytest.fixture
def copy(qgis_app, region, tmp_path):
    folder = tmp_path / "in"
    shutil.copytree(region["gauges"].parent, folder)
    (tmp_path / "out").mkdir()
    return {name: folder / path.name for name, path in region.items()}


def _parameters(paths, out_folder, **changes):
    parameters = {
        "GAUGES": str(paths["gauges"]),
        "DISCHARGE": str(paths["discharge"]),
        "CATCHMENTS": str(paths["catchments"]),
        "OUTPUT": str(out_folder / "qgis.gpkg"),
        "ANNUAL": str(out_folder / "qgis_annual.gpkg"),
    }
    parameters.update(changes)
    return parameters


def _both(paths, tmp_path, capsys, cli_extra=(), **qgis_changes):
    """Run the command line and processing.run on the same files; return (exit code, CLI
    stderr, QGIS exception text or None), checking the inputs are unchanged by either."""
    import processing

    folder = paths["gauges"].parent
    before = digests(folder)
    out = tmp_path / "out"
    code = main(
        [
            "run",
            "--gauges", str(paths["gauges"]),
            "--catchments", str(paths["catchments"]),
            "--discharge", str(paths["discharge"]),
            "--out", str(out / "cli.gpkg"),
            *cli_extra,
        ]
    )  # fmt: skip
    err = capsys.readouterr().err
    try:
        processing.run(
            ALGORITHM, _parameters(paths, out, **qgis_changes), feedback=QgsProcessingFeedback()
        )
        qgis = None
    except QgsProcessingException as exc:
        qgis = str(exc)
    assert digests(folder) == before, "an input changed"
    return code, err, qgis


def _cli_error(err):
    lines = [line for line in err.splitlines() if line.startswith("recharge-atlas: error: ")]
    assert len(lines) == 1, err
    return lines[0]


def _rewrite(path, change):
    frame = pd.read_csv(path, dtype=str)
    change(frame)
    frame.to_csv(path, index=False)


# --------------------------------------------------------------------------- errors


def test_missing_field_same_words(copy, tmp_path, capsys):
    code, err, qgis = _both(copy, tmp_path, capsys, ["--value-field", "flow"], VALUE_FIELD="flow")
    assert code == 2 and qgis is not None
    message = _core(_cli_error(err))
    assert message.startswith("the discharge table has no field 'flow'; fields found:")
    assert message in qgis and "VALUE_FIELD" in qgis
    assert "; name the right field with --value-field" in _cli_error(err)
    assert list((tmp_path / "out").iterdir()) == []


@pytest.mark.parametrize(
    ("what", "change", "words"),
    [
        (
            "no date readable",
            lambda f: f.__setitem__("date", "week " + f.index.astype(str)),
            "no value of the date field could be read as a date (row 1: 'week 0')",
        ),
        (
            "day and month first together",
            lambda f: f.__setitem__(
                "date",
                [
                    pd.Timestamp(d).strftime("%d/%m/%Y" if g == "AB1" else "%m/%d/%Y")
                    for g, d in zip(f["gauge_id"], f["date"])
                ],
            ),
            "the dates mix day/month/year",
        ),
        (
            "no gauge id matches",
            lambda f: f.__setitem__("gauge_id", "0" + f["gauge_id"].str.lower()),
            "no gauge id of the discharge table matches the gauges layer",
        ),
        (
            "no value a number",
            lambda f: f.__setitem__("discharge", "about " + f["discharge"]),
            "no value of the discharge field is a number (row 1: 'about ",
        ),
        (
            "every value missing",
            lambda f: f.__setitem__(
                "discharge", ["", "n/a", "NaN", "-"] * (len(f) // 4) + [""] * (len(f) % 4)
            ),
            "no gauge has a usable discharge value",
        ),
    ],
    ids=[
        "no date readable",
        "day and month first together",
        "no id matches",
        "no number",
        "all missing",
    ],
)
def test_discharge_errors_same_words(copy, tmp_path, capsys, what, change, words):
    _rewrite(copy["discharge"], change)
    code, err, qgis = _both(copy, tmp_path, capsys)
    assert code == 2 and qgis is not None, (err, qgis)
    message = _core(_cli_error(err))
    assert words in message
    assert _core(qgis) == message, (qgis, message)
    assert "Traceback" not in qgis
    assert list((tmp_path / "out").iterdir()) == []


def test_catchments_without_crs(copy, tmp_path, capsys):
    import sqlite3

    # Undefine the layer's CRS in place, as a GeoPackage written without one has it.
    with sqlite3.connect(copy["catchments"]) as db:
        db.execute("UPDATE gpkg_geometry_columns SET srs_id = 0")
        db.execute("UPDATE gpkg_contents SET srs_id = 0")
    code, err, qgis = _both(copy, tmp_path, capsys)
    assert code == 2 and qgis is not None
    words = "the catchments layer has no coordinate reference system (CRS)"
    assert words in _cli_error(err) and words in qgis
    assert list((tmp_path / "out").iterdir()) == []


def test_internal_error_same_words(copy, tmp_path, capsys, monkeypatch):
    def broken(*args, **kwargs):
        raise ZeroDivisionError("float division by zero")

    monkeypatch.setattr(pipeline, "run_atlas", broken)
    code, err, qgis = _both(copy, tmp_path, capsys)
    assert code == 1
    assert "recharge-atlas: internal error: ZeroDivisionError: float division by zero" in err
    assert qgis.startswith("internal error: ZeroDivisionError: float division by zero")
    assert "Traceback" not in qgis
    assert list((tmp_path / "out").iterdir()) == []


# --------------------------------------------------------------------------- flagged


def test_flagged_gauge_same_quality(copy, tmp_path, capsys):
    def spoil(frame):
        mine = frame.index[frame["gauge_id"] == "AB1"]
        frame.loc[mine, "discharge"] = "0"
        frame.loc[mine[[5, 9]], "date"] = "not yet"

    _rewrite(copy["discharge"], spoil)
    code, err, qgis = _both(copy, tmp_path, capsys)
    assert code == 0 and qgis is None, (err, qgis)
    out = tmp_path / "out"

    def quality(path):
        # The same layer name from both (issue 15: QGIS named it after the file).
        layer = QgsVectorLayer(f"{path}|layername=catchments")
        assert layer.isValid(), path
        return {f["gauge_id"]: f["quality"] for f in layer.getFeatures()}

    cli, qgis_quality = quality(out / "cli.gpkg"), quality(out / "qgis.gpkg")
    assert cli == qgis_quality
    assert "flow is zero on every day with a value" in cli["AB1"]
    assert "2 rows with a date that could not be read left out (e.g. 'not yet')" in cli["AB1"]
    assert cli["CD2"] == "ok" and cli["EF3"] == "ok"


@pytest.mark.parametrize("output", ["OUTPUT", "ANNUAL"])
def test_output_into_an_input_file_is_refused(copy, tmp_path, output):
    """Writing a layer into the catchments' GeoPackage would change an input: refused, in the
    command line's words, before any work."""
    import processing
    from support_qgis import gpkg_layer

    before = digests(copy["gauges"].parent)
    target = gpkg_layer(copy["catchments"], "recharge", geometry=output == "OUTPUT")
    parameters = _parameters(copy, tmp_path / "out", **{output: target})
    with pytest.raises(QgsProcessingException) as caught:
        processing.run(ALGORITHM, parameters, feedback=QgsProcessingFeedback())
    assert str(caught.value) == (
        f"the output path is one of the input files ({output}) (file {copy['catchments']})"
    )
    assert digests(copy["gauges"].parent) == before
    assert list((tmp_path / "out").iterdir()) == []
