"""PostgreSQL/PostGIS sources and targets (issue 16), against a real throwaway server
(tests/pg_server.py: Debian's PostgreSQL 15 and PostGIS 3, a Unix socket only)."""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest
from pg_server import load_frame as _load
from pg_server import start_or_skip

from recharge_atlas.algorithms import database
from recharge_atlas.algorithms.errors import InputError
from recharge_atlas.algorithms.files import read_layer, read_table

ODD_SCHEMA = 'Odd "Schema"; DROP TABLE x; --'
ODD_TABLE = "Flow.Table;1"


@pytest.fixture(scope="module")
def server(tmp_path_factory, sample_paths):
    server = start_or_skip(tmp_path_factory.mktemp("pg"))
    gauges = read_layer(sample_paths["gauges"], "gauges")
    catchments = read_layer(sample_paths["catchments"], "catchments")
    flow = read_table(sample_paths["discharge"])
    flow["discharge"] = pd.to_numeric(flow["discharge"], errors="coerce")
    srid = gauges.crs.to_epsg()
    with server.connect() as conn:
        _load(conn, "public", "gauges", gauges, srid)
        _load(conn, "public", "catchments", catchments, srid)
        _load(conn, "telemetry", "daily_flow", flow[["gauge_id", "date", "discharge"]])
        _load(conn, ODD_SCHEMA, ODD_TABLE, flow[["gauge_id", "date", "discharge"]])
        conn.execute("CREATE ROLE reader LOGIN")
        conn.execute("GRANT USAGE ON SCHEMA telemetry TO reader")
        conn.execute("GRANT SELECT ON ALL TABLES IN SCHEMA public, telemetry TO reader")
        conn.execute("REVOKE CREATE ON SCHEMA public FROM PUBLIC")
        conn.execute("REVOKE CREATE ON DATABASE hydro FROM PUBLIC")
    yield server
    server.stop()


def test_sources_are_told_from_files_and_split():
    assert database.is_database("postgresql://u@h/db|layername=a.b")
    assert database.is_database("postgres:///db?host=/run/postgresql")
    assert not database.is_database("gauges.gpkg") and not database.is_database("C:/pg/x.csv")
    assert database.split("postgresql:///hydro?host=/s|layername=telemetry.daily_flow") == (
        "postgresql:///hydro?host=/s",
        {"layername": "telemetry.daily_flow"},
    )
    assert database.table_name("telemetry.daily_flow") == ("telemetry", "daily_flow")
    assert database.table_name('"My.Schema"."Flow ""x"""') == ("My.Schema", 'Flow "x"')
    assert database.table_name("gauges") == (None, "gauges")
    with pytest.raises(InputError):
        database.table_name("a.b.c")


def test_layers_read_as_from_the_files(server, sample_paths):
    gauges = database.read_layer(server.uri() + "|layername=gauges", "gauges")
    expected = read_layer(sample_paths["gauges"], "gauges")
    assert gauges.crs == expected.crs
    assert list(gauges["gauge_id"]) == list(expected["gauge_id"])
    assert all(a.equals_exact(b, 1e-9) for a, b in zip(gauges.geometry, expected.geometry))
    catchments = database.read_layer(server.uri() + "|layername=public.catchments", "catchments")
    assert len(catchments) == len(read_layer(sample_paths["catchments"], "catchments"))


def test_discharge_is_read_in_groups_with_only_the_needed_columns(server, sample_paths):
    flow = read_table(sample_paths["discharge"])
    ids = sorted(flow["gauge_id"].unique())
    source = server.uri() + "|layername=telemetry.daily_flow"
    groups = list(database.discharge_groups(source, "gauge_id", ids[:3], 2, ["date", "discharge"]))
    assert [sorted(g["gauge_id"].unique()) for g in groups] == [ids[:2], ids[2:3]]
    both = pd.concat(groups).sort_values(["gauge_id", "date"]).reset_index(drop=True)
    wanted = flow[flow["gauge_id"].isin(ids[:3])].sort_values(["gauge_id", "date"])
    assert list(both.columns) == ["gauge_id", "date", "discharge"]
    np.testing.assert_allclose(
        both["discharge"].to_numpy(float),
        pd.to_numeric(wanted["discharge"], errors="coerce").to_numpy(float),
        equal_nan=True,
    )


def test_the_run_from_the_database_gives_the_files_numbers(server, sample_paths):
    from recharge_atlas.algorithms.pipeline import Settings, run_atlas

    def run(gauges, catchments, flow):
        return run_atlas(gauges, catchments, flow, Settings()).catchments

    uri = server.uri()
    from_db = run(
        database.read_layer(uri + "|layername=gauges", "gauges"),
        database.read_layer(uri + "|layername=catchments", "catchments"),
        database.read_table(uri + "|layername=telemetry.daily_flow"),
    )
    from_files = run(
        read_layer(sample_paths["gauges"], "gauges"),
        read_layer(sample_paths["catchments"], "catchments"),
        read_table(sample_paths["discharge"]),
    )
    np.testing.assert_allclose(
        from_db["recharge_mm_per_year"].to_numpy(float),
        from_files["recharge_mm_per_year"].to_numpy(float),
        rtol=1e-12,
        equal_nan=True,
    )


@pytest.fixture(scope="module")
def demo_result(server, sample_paths):
    from recharge_atlas.algorithms.pipeline import Settings, run_atlas

    return run_atlas(
        read_layer(sample_paths["gauges"], "gauges"),
        read_layer(sample_paths["catchments"], "catchments"),
        read_table(sample_paths["discharge"]),
        Settings(),
    )


def test_results_go_in_as_one_transaction_and_are_never_replaced_silently(server, demo_result):
    from recharge_atlas.algorithms.provenance import Provenance

    target = server.uri(password="s3cret") + "|schema=recharge_2026"
    run = Provenance("test", [("--discharge", server.uri(password="s3cret"))], [])
    database.write_results(demo_result, target, provenance=run)
    with server.connect() as conn:
        names = {
            r[0]
            for r in conn.execute(
                "SELECT table_name FROM information_schema.tables WHERE table_schema = %s",
                ("recharge_2026",),
            )
        }
        values = conn.execute(
            "SELECT recharge_mm_per_year, ST_SRID(geom), ST_Area(geom) > 0 "
            "FROM recharge_2026.catchments ORDER BY fid"
        ).fetchall()
        recorded = " ".join(str(r) for r in conn.execute("SELECT * FROM recharge_2026.run"))
    assert {"catchments", "annual", "events", "periods", "segments", "master_recession", "links",
            "run"} <= names  # fmt: skip
    expected = demo_result.catchments["recharge_mm_per_year"].to_numpy(float)
    got = np.array([np.nan if v is None else v for v, _, _ in values], dtype=float)
    np.testing.assert_allclose(got, expected, equal_nan=True)
    assert {srid for _, srid, _ in values} == {demo_result.catchments.crs.to_epsg()}
    assert "s3cret" not in recorded
    # Again: refused, naming the table and the option; with overwrite: replaced.
    with pytest.raises(InputError, match="exists already; give --overwrite"):
        database.write_results(demo_result, target)
    database.write_results(demo_result, target, overwrite=True)


def test_a_role_without_write_privilege_writes_nothing(server, demo_result):
    target = server.uri(user="reader") + "|schema=not_allowed"
    with pytest.raises(InputError, match="no permission to write into schema 'not_allowed'"):
        database.write_results(demo_result, target)
    with server.connect() as conn:
        assert conn.execute(
            "SELECT count(*) FROM information_schema.schemata WHERE schema_name = 'not_allowed'"
        ).fetchone() == (0,)
    # The same role reads the inputs.
    flow = database.read_table(server.uri(user="reader") + "|layername=telemetry.daily_flow")
    assert len(flow) > 1000


def test_names_with_quotes_semicolons_and_mixed_case(server, demo_result):
    quoted = '"' + ODD_SCHEMA.replace('"', '""') + '"."' + ODD_TABLE + '"'
    flow = database.read_table(server.uri() + "|layername=" + quoted)
    assert len(flow) > 1000 and list(flow.columns) == ["gauge_id", "date", "discharge"]
    database.write_results(demo_result, server.uri() + "|schema=Results; DROP SCHEMA public")
    with server.connect() as conn:
        assert conn.execute("SELECT count(*) FROM \"Results; DROP SCHEMA public\".catchments"
                            ).fetchone()[0] == len(demo_result.catchments)  # fmt: skip
        assert conn.execute("SELECT to_regclass('public.gauges')").fetchone()[0] is not None


def test_clear_errors(server, monkeypatch):
    with pytest.raises(InputError, match="has no table 'nothing'"):
        database.read_table(server.uri() + "|layername=nothing")
    with pytest.raises(InputError, match=r"add \|layername="):
        database.read_table(server.uri())
    with pytest.raises(InputError, match="cannot connect") as failed:
        database.read_table(server.uri(database="absent", password="s3cret") + "|layername=x")
    assert "s3cret" not in str(failed.value)
    import builtins

    real = builtins.__import__

    def no_psycopg(name, *args, **kwargs):
        if name == "psycopg" or name.startswith("psycopg."):
            raise ImportError(name)
        return real(name, *args, **kwargs)

    monkeypatch.setattr(builtins, "__import__", no_psycopg)
    with pytest.raises(InputError, match="needs the psycopg package"):
        database.read_table(server.uri() + "|layername=gauges")


def test_command_line_reads_and_writes_the_database(server, sample_paths, tmp_path, capsys):
    from test_end_to_end import run_args

    from recharge_atlas.cli import main

    reader = server.uri(user="reader", password="s3cret")
    inputs = [
        "--gauges", reader + "|layername=gauges",
        "--catchments", reader + "|layername=catchments",
        "--discharge", reader + "|layername=telemetry.daily_flow",
    ]  # fmt: skip
    # A read-only role with a GeoPackage output.
    gpkg = tmp_path / "recharge.gpkg"
    assert main(["run", *inputs, "--out", str(gpkg)]) == 0
    from recharge_atlas.algorithms.files import read_attribute_table

    run = read_attribute_table(gpkg, "run")
    assert "s3cret" not in run.to_string()
    assert "***" in " ".join(run["value"].astype(str))
    capsys.readouterr()
    # The same role cannot write: exit 2, the plain reason, nothing written.
    target = reader + "|schema=cli_out"
    assert main(["run", *inputs, "--out", target]) == 2
    err = capsys.readouterr().err
    assert "no permission to write into schema 'cli_out'" in err and "s3cret" not in err
    # The owner writes, is refused a second time, and replaces with --overwrite.
    owner = server.uri() + "|schema=cli_out"
    assert main(["run", *inputs, "--out", owner]) == 0
    assert main(["run", *inputs, "--out", owner]) == 2
    assert "give --overwrite" in capsys.readouterr().err
    assert main(["run", *inputs, "--out", owner, "--overwrite"]) == 0
    # The round trip, table by table: files -> database -> run from it into it equals the
    # run from the files into a GeoPackage.
    files_run = tmp_path / "files.gpkg"
    assert main(run_args(sample_paths, files_run)) == 0
    from_file = read_layer(f"{files_run}|layername=catchments", "catchments")
    from_db = database.read_layer(server.uri() + "|layername=cli_out.catchments", "catchments")
    _same_table(from_db.drop(columns=["fid", "geometry"]), from_file.drop(columns="geometry"))
    assert all(a.equals_exact(b, 1e-9) for a, b in zip(from_db.geometry, from_file.geometry))
    for name in ("annual", "events", "periods", "segments", "master_recession", "links"):
        db_table = database.read_table(server.uri() + f"|layername=cli_out.{name}")
        _same_table(db_table.drop(columns="fid"), read_attribute_table(files_run, name), name)


def _same_table(got, expected, name="catchments"):
    """Equal cell by cell: numbers to 1e-12, text and dates exactly, NULL for NULL."""
    assert list(got.columns) == list(expected.columns), name
    assert len(got) == len(expected), name
    for column in expected.columns:
        a, b = got[column], expected[column]
        if pd.api.types.is_datetime64_any_dtype(a) and not pd.api.types.is_datetime64_any_dtype(b):
            # A GeoPackage holds dates as ISO text; the database as dates.
            a = a.dt.strftime("%Y-%m-%d").where(a.notna(), None)
        if pd.api.types.is_numeric_dtype(b) and not pd.api.types.is_bool_dtype(b):
            np.testing.assert_allclose(
                a.to_numpy(float), b.to_numpy(float), rtol=1e-12, equal_nan=True,
                err_msg=f"{name}.{column}",
            )  # fmt: skip
        elif pd.api.types.is_datetime64_any_dtype(b):
            assert (pd.to_datetime(a).fillna(pd.Timestamp(0)) == b.fillna(pd.Timestamp(0))).all()
        else:
            left = [None if pd.isna(v) else str(v) for v in a]
            right = [None if pd.isna(v) else str(v) for v in b]
            if pd.api.types.is_bool_dtype(b):
                left = [None if v is None else str(v in ("True", "1", "true")) for v in left]
            assert left == right, f"{name}.{column}"


def test_a_generated_network_runs_in_gauge_groups_from_the_database(server, tmp_path):
    # The benchmark's synthetic network, small: read on the server five gauges at a time, it
    # gives the numbers of the same table read whole from a CSV file.
    from recharge_atlas.cli import main
    from recharge_atlas.sample_layers.generate import make_network

    network = make_network(n_gauges=12, years=4, seed=3)
    n_gauges, n_days = network.flow.shape
    ids = list(network.gauges["gauge_id"])
    table = pd.DataFrame(
        {
            "gauge_id": np.repeat(np.asarray(ids, dtype=object), n_days),
            "date": np.tile(network.dates.strftime("%Y-%m-%d").to_numpy(), n_gauges),
            "discharge": network.flow.reshape(-1),
        }
    )
    csv = tmp_path / "flow.csv"
    table.to_csv(csv, index=False)
    gauges, catchments = tmp_path / "gauges.gpkg", tmp_path / "catchments.gpkg"
    network.gauges.to_file(gauges, driver="GPKG")
    network.catchments.to_file(catchments, driver="GPKG")
    with server.connect() as conn:
        _load(conn, "network", "flow", table)
    args = ["run", "--gauges", str(gauges), "--catchments", str(catchments)]
    assert main([*args, "--discharge", str(csv), "--out", str(tmp_path / "a.gpkg")]) == 0
    source = server.uri() + "|layername=network.flow"
    out = tmp_path / "b.gpkg"
    assert main([*args, "--discharge", source, "--gauges-per-group", "5", "--out", str(out)]) == 0
    a = read_layer(f"{tmp_path / 'a.gpkg'}|layername=catchments", "catchments")
    b = read_layer(f"{out}|layername=catchments", "catchments")
    np.testing.assert_allclose(
        b["recharge_mm_per_year"].to_numpy(float), a["recharge_mm_per_year"].to_numpy(float),
        rtol=1e-12, equal_nan=True,
    )  # fmt: skip
    assert np.isfinite(a["recharge_mm_per_year"].to_numpy(float)).sum() >= 10
