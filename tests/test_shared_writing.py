"""A run's GeoPackage written by two processes (geopackage._TableHelper) holds exactly what
one process writes: the same tables, declared the same way, listed in the same order, rows
in the same order with the same cells; and a helper that fails, or a run stopped while it
works, leaves nothing behind."""

from __future__ import annotations

import multiprocessing
import os
import sqlite3

import pytest

from recharge_atlas.algorithms import geopackage
from recharge_atlas.algorithms.parallel import forks
from recharge_atlas.algorithms.pipeline import run_atlas

pytestmark = pytest.mark.skipif(not forks(), reason="the second writer is forked (Linux)")

#: Written when and by whom: left out of the comparison.
WHEN = {"run", "gpkg_metadata", "gpkg_metadata_reference"}
TIMESTAMPS = {"gpkg_contents": "last_change", "layer_styles": "update_time"}


@pytest.fixture(scope="module")
def result(demo_region):
    return run_atlas(demo_region.gauges, demo_region.catchments, demo_region.discharge)


def _everything(path):
    """Every table's declaration and its rows in stored order (timestamps left out), and the
    order tables were created and listed in."""
    with sqlite3.connect(path) as db:
        created = [
            (name, sql)
            for name, sql in db.execute(
                "SELECT name, sql FROM sqlite_master WHERE type = 'table' ORDER BY rowid"
            )
            if name not in WHEN
        ]
        rows = {}
        for name, _ in created:
            columns = [r[1] for r in db.execute(f'PRAGMA table_info("{name}")')]
            kept = ", ".join(f'"{c}"' for c in columns if c != TIMESTAMPS.get(name))
            rows[name] = db.execute(f'SELECT {kept} FROM "{name}" ORDER BY rowid').fetchall()
    # Each table's last feature id, in the order its first row went in: not the same order.
    rows["sqlite_sequence"].sort()
    return created, rows


def _write(result, path, monkeypatch, shared):
    monkeypatch.setattr(geopackage, "SHARED_WRITING_CELLS", 0 if shared else 10**15)
    geopackage.write_geopackage(result, path)
    return _everything(path)


def test_two_writers_write_what_one_writes(result, tmp_path, monkeypatch):
    alone = _write(result, tmp_path / "alone.gpkg", monkeypatch, shared=False)
    started = []
    real = geopackage._TableHelper.start

    def start(temp, tables):
        helper = real(temp, tables)
        started.append(list(helper.kinds))
        return helper

    monkeypatch.setattr(geopackage._TableHelper, "start", start)
    shared = _write(result, tmp_path / "shared.gpkg", monkeypatch, shared=True)
    assert started and started[0] and "events" in started[0]  # the helper did write some
    assert shared[0] == alone[0]
    for name in alone[1]:
        assert shared[1][name] == alone[1][name], name
    assert sorted(p.name for p in tmp_path.iterdir()) == ["alone.gpkg", "shared.gpkg"]
    assert not multiprocessing.active_children()


@pytest.mark.parametrize("how", ["raises", "dies"])
def test_a_failed_helper_leaves_its_tables_to_the_run(result, tmp_path, monkeypatch, how):
    def broken(path, tables, sender, parent_pid):
        if how == "dies":  # killed, say, by the kernel: no word to the parent
            sender.close()
            os._exit(9)
        sender.send("OSError: something went wrong")

    alone = _write(result, tmp_path / "alone.gpkg", monkeypatch, shared=False)
    monkeypatch.setattr(geopackage, "_helper_writes", broken)
    shared = _write(result, tmp_path / "shared.gpkg", monkeypatch, shared=True)
    assert shared == alone
    assert sorted(p.name for p in tmp_path.iterdir()) == ["alone.gpkg", "shared.gpkg"]


def test_a_run_stopped_while_the_helper_writes_leaves_nothing(result, tmp_path, monkeypatch):
    def stopped(*args, **kwargs):
        raise KeyboardInterrupt

    monkeypatch.setattr(geopackage, "SHARED_WRITING_CELLS", 0)
    monkeypatch.setattr(geopackage, "write_layer", stopped)
    with pytest.raises(KeyboardInterrupt):
        geopackage.write_geopackage(result, tmp_path / "out.gpkg")
    assert list(tmp_path.iterdir()) == []
    assert not multiprocessing.active_children()


def test_a_full_disk_is_said_in_words_when_the_helper_fails_too(result, tmp_path, monkeypatch):
    import errno

    from recharge_atlas.algorithms.errors import InputError

    def full(*args, **kwargs):
        raise OSError(errno.ENOSPC, os.strerror(errno.ENOSPC))

    monkeypatch.setattr(geopackage, "SHARED_WRITING_CELLS", 0)
    monkeypatch.setattr(geopackage, "_insert_rows", full)  # in both processes (forked)
    with pytest.raises(InputError, match="no space left on device while writing the output"):
        geopackage.write_geopackage(result, tmp_path / "out.gpkg")
    assert list(tmp_path.iterdir()) == []


def test_the_helpers_file_left_by_a_killed_run_is_removed_by_the_next(tmp_path):
    import subprocess
    import sys

    from recharge_atlas.algorithms import outputs

    gone = subprocess.run([sys.executable, "-c", "import os; print(os.getpid())"],
                          capture_output=True, text=True, check=True)  # fmt: skip
    dead = outputs.owner_tag().replace(f"-{os.getpid()}-", f"-{gone.stdout.strip()}-")
    left = tmp_path / f".recharge.{dead}abcd1234.gpkg-tables"
    alive = tmp_path / f".recharge.{outputs.owner_tag()}abcd1234.gpkg-tables"
    for path in (left, alive):
        path.write_text("rows")
    outputs.remove_dead_leftovers([tmp_path])
    assert not left.exists() and alive.exists()


def test_a_stuck_helper_is_given_up_on_and_its_tables_written_by_the_run(
    result, tmp_path, monkeypatch
):
    import time

    def stuck(path, tables, sender, parent_pid):
        time.sleep(600)  # killed by the run long before

    alone = _write(result, tmp_path / "alone.gpkg", monkeypatch, shared=False)
    monkeypatch.setattr(geopackage, "_helper_writes", stuck)
    monkeypatch.setattr(geopackage, "HELPER_PATIENCE", (0.0, 0.5))
    started = time.monotonic()
    shared = _write(result, tmp_path / "shared.gpkg", monkeypatch, shared=True)
    assert time.monotonic() - started < 60
    assert shared == alone
    assert sorted(p.name for p in tmp_path.iterdir()) == ["alone.gpkg", "shared.gpkg"]
    assert not multiprocessing.active_children()
