"""QGIS with PostgreSQL/PostGIS (issue 16): a discharge table that is a PostgreSQL layer is
read by one query on the layer's own connection (the log says so) and gives the numbers of
the files; outputs written to a PostGIS destination work. A throwaway server on a Unix socket
(tests/pg_server.py)."""

from __future__ import annotations

import sys
from pathlib import Path

import numpy as np
import pytest

pytest.importorskip("qgis.core")

sys.path.insert(0, str(Path(__file__).resolve().parents[1]))  # tests/: pg_server

from pg_server import SUPERUSER, load_frame, start_or_skip  # noqa: E402
from qgis.core import QgsVectorLayer  # noqa: E402
from support_qgis import SAMPLE, sample_parameters  # noqa: E402


@pytest.fixture(scope="module")
def server(qgis_app, tmp_path_factory):
    from recharge_atlas.algorithms.files import read_layer, read_table

    server = start_or_skip(tmp_path_factory.mktemp("pg"))
    flow = read_table(SAMPLE / "discharge.csv")
    gauges = read_layer(SAMPLE / "gauges.gpkg", "gauges")
    catchments = read_layer(SAMPLE / "catchments.gpkg", "catchments")
    with server.connect() as conn:
        load_frame(conn, "public", "gauges", gauges, gauges.crs.to_epsg())
        load_frame(conn, "public", "catchments", catchments, catchments.crs.to_epsg())
        load_frame(conn, "telemetry", "flow_text", flow[["gauge_id", "date", "discharge"]])
        # Typed as an agency keeps it: real dates and numbers.
        conn.execute(
            'CREATE TABLE telemetry."Daily Flow" AS SELECT gauge_id, '
            "NULLIF(date, '')::date AS date, NULLIF(discharge, '')::double precision "
            "AS discharge FROM telemetry.flow_text"
        )
        conn.execute("CREATE SCHEMA results")
    yield server
    server.stop()


def _layer(server, schema, table, geometry=None):
    where = f'table="{schema}"."{table}"' + (f" ({geometry})" if geometry else "")
    source = f"dbname='hydro' host={server.socket} user={SUPERUSER} {where} sql="
    layer = QgsVectorLayer(source, table, "postgres")
    assert layer.isValid(), source
    return layer


def test_discharge_from_postgres_by_one_query_and_output_to_postgis(
    server, core_result, log_feedback
):
    import processing

    layer = _layer(server, "telemetry", "Daily Flow")
    feedback = log_feedback()
    destination = (
        f"postgis:dbname='hydro' host={server.socket} user={SUPERUSER} "
        'table="results"."catchments" (geom)'
    )
    # Every input from the database: gauges, catchments and discharge.
    results = processing.run(
        "recharge_atlas:catchmentrecharge",
        sample_parameters(
            GAUGES=_layer(server, "public", "gauges", "geom"),
            CATCHMENTS=_layer(server, "public", "catchments", "geom"),
            DISCHARGE=layer,
            OUTPUT=destination,
        ),
        feedback=feedback,
    )
    assert "read from the database by one query" in feedback.text("info")
    with server.connect() as conn:
        rows = conn.execute(
            "SELECT name, recharge_mm_per_year FROM results.catchments ORDER BY name"
        ).fetchall()
    assert results["OUTPUT"]
    expected = core_result.catchments.set_index("name")["recharge_mm_per_year"]
    assert [name for name, _ in rows] == sorted(expected.index)
    got = np.array([np.nan if v is None else v for _, v in rows], float)
    np.testing.assert_allclose(got, expected.loc[[n for n, _ in rows]].to_numpy(float),
                               rtol=1e-9, equal_nan=True)  # fmt: skip


def test_a_filtered_postgres_layer_is_read_through_qgis(server, log_feedback, tmp_path):
    # A subset of the table: only QGIS knows which rows it holds, so QGIS reads them.
    import processing

    layer = _layer(server, "telemetry", "Daily Flow")
    layer.setSubsetString("gauge_id = 'QM01'")
    feedback = log_feedback()
    processing.run(
        "recharge_atlas:catchmentrecharge",
        sample_parameters(DISCHARGE=layer, OUTPUT=str(tmp_path / "out.gpkg")),
        feedback=feedback,
    )
    assert "Discharge table read through QGIS" in feedback.text("info")
