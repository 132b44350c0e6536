"""A large run hands its event, period and segment rows to a table sink group by group (the
command line keeps them on disk), and the outputs are the same as when they stay in memory."""

from __future__ import annotations

import sqlite3
import tempfile

import pandas as pd
import pytest

from recharge_atlas.algorithms.files import read_attribute_table
from recharge_atlas.algorithms.groups import SINK_TABLES
from recharge_atlas.algorithms.pipeline import run_atlas


@pytest.fixture(scope="module")
def kept(demo_region):
    return run_atlas(demo_region.gauges, demo_region.catchments, demo_region.discharge)


def _gauge_groups(discharge, gauge_ids, size):
    """The discharge table as groups of ``size`` gauges, in the gauges' order."""
    ids = discharge["gauge_id"].astype(str)
    for start in range(0, len(gauge_ids), size):
        yield discharge[ids.isin(gauge_ids[start : start + size])]


@pytest.mark.parametrize("size", [None, 2])
def test_the_sink_gets_every_row_in_the_gauges_order(demo_region, kept, size):
    got = {name: [] for name in SINK_TABLES}

    def sink(name, frame):
        got[name].append(frame)

    gauge_ids = list(demo_region.gauges["gauge_id"].astype(str))
    discharge = (
        demo_region.discharge
        if size is None
        else _gauge_groups(demo_region.discharge, gauge_ids, size)
    )
    sunk = run_atlas(
        demo_region.gauges, demo_region.catchments, discharge, keep_series=False, table_sink=sink
    )
    assert sunk.sunk_tables == SINK_TABLES
    for name in SINK_TABLES:
        rows = pd.concat(got[name], ignore_index=True)
        pd.testing.assert_frame_equal(rows, getattr(kept, name), obj=name)
        # The result holds them no more: the table is empty, with its columns.
        assert len(getattr(sunk, name)) == 0
        assert list(getattr(sunk, name).columns) == list(getattr(kept, name).columns)
        assert all(name not in g.tables for g in sunk.gauges.values())
    assert all(
        g.recession is None or g.recession.segment_columns is None for g in sunk.gauges.values()
    )
    # What the catchments and the gauge table say about events comes out the same.
    pd.testing.assert_frame_equal(
        sunk.catchments.drop(columns="geometry"), kept.catchments.drop(columns="geometry")
    )
    pd.testing.assert_frame_equal(sunk.gauge_table(), kept.gauge_table())
    pd.testing.assert_frame_equal(sunk.annual, kept.annual)
    assert "written as the run went" in repr(sunk)


def _run(sample_paths, out, *extra):
    from recharge_atlas.cli import main

    args = ["run", "--gauges", str(sample_paths["gauges"])]
    args += ["--catchments", str(sample_paths["catchments"])]
    args += ["--discharge", str(sample_paths["discharge"]), "--out", str(out), *extra]
    return main(args)


def test_a_run_read_in_groups_writes_the_same_tables_and_leaves_no_file(
    tmp_path, sample_paths, monkeypatch
):
    scratch = tmp_path / "scratch"
    scratch.mkdir()
    monkeypatch.setattr(tempfile, "tempdir", str(scratch))
    assert _run(sample_paths, tmp_path / "whole.gpkg", "--gauges-per-group", "0") == 0
    assert _run(sample_paths, tmp_path / "groups.gpkg", "--gauges-per-group", "2") == 0
    for name in (*SINK_TABLES, "annual", "links"):
        pd.testing.assert_frame_equal(
            read_attribute_table(tmp_path / "whole.gpkg", name),
            read_attribute_table(tmp_path / "groups.gpkg", name),
            obj=name,
        )
    # Same column types and row counts in the GeoPackage's own lists.
    queries = {
        "columns": "SELECT name, sql FROM sqlite_master WHERE name IN ({})",
        "counts": "SELECT table_name, feature_count FROM gpkg_ogr_contents WHERE table_name IN ({})",
    }
    names = ", ".join(f"'{n}'" for n in SINK_TABLES)
    for query in queries.values():
        found = []
        for path in (tmp_path / "whole.gpkg", tmp_path / "groups.gpkg"):
            with sqlite3.connect(path) as db:
                found.append(sorted(db.execute(query.format(names)).fetchall()))
        assert found[0] == found[1]
    assert list(scratch.iterdir()) == []


def test_the_kept_tables_are_removed_when_the_output_cannot_be_written(
    tmp_path, sample_paths, monkeypatch
):
    from recharge_atlas.algorithms import files

    scratch = tmp_path / "scratch"
    scratch.mkdir()
    monkeypatch.setattr(tempfile, "tempdir", str(scratch))

    def broken(*args, **kwargs):
        raise OSError(28, "No space left on device")

    monkeypatch.setattr(files, "write_geopackage", broken)
    assert _run(sample_paths, tmp_path / "out.gpkg", "--gauges-per-group", "2") != 0
    assert list(scratch.iterdir()) == []
    assert not (tmp_path / "out.gpkg").exists()


def test_a_subbasin_run_read_in_groups_gives_the_same_layers_and_tables(tmp_path, sample_paths):
    import geopandas as gpd

    from recharge_atlas.cli import main

    subbasins = str(sample_paths["catchments"].parent / "subbasins.gpkg")
    outputs = {}
    for per_group in ("0", "2"):
        out = tmp_path / f"sub{per_group}.gpkg"
        args = ["run", "--gauges", str(sample_paths["gauges"]), "--subbasins", subbasins]
        args += ["--discharge", str(sample_paths["discharge"]), "--out", str(out)]
        args += [
            "--gauges-per-group",
            per_group,
            "--year-maps",
            str(tmp_path / f"y{per_group}.png"),
        ]
        assert main(args) == 0
        outputs[per_group] = out
    for layer in ("subbasins", "catchments"):
        whole, groups = (gpd.read_file(outputs[k], layer=layer) for k in ("0", "2"))
        pd.testing.assert_frame_equal(
            whole.drop(columns="geometry"), groups.drop(columns="geometry")
        )
    for name in (*SINK_TABLES, "annual"):
        pd.testing.assert_frame_equal(
            read_attribute_table(outputs["0"], name), read_attribute_table(outputs["2"], name)
        )
    assert (tmp_path / "y2.png").exists()
