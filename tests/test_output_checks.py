"""Outputs that cannot be written, said plainly (issue 14, items 10, 11, 15 and 16).

A full disk, a file-size limit, a demo folder that cannot be made, a name too long for the
file system, a read-only target or a file of another format under the output's name: each is
exit 2 with one line naming the file, never exit 1, and nothing is left or replaced. The cases
run the command line on the small invented region of ``tests/bad_input_cases.py``.
"""

from __future__ import annotations

import errno
import os
import sqlite3
import stat
import subprocess
import sys
from pathlib import Path

import pytest
from messy_region import digests
from test_end_to_end import run_args

from recharge_atlas.algorithms import geopackage, outputs, pipeline
from recharge_atlas.cli import main


def _raise(exc):
    def raising(*args, **kwargs):
        raise exc

    return raising


# --------------------------------------------------------------------------- 10: disk full


@pytest.mark.parametrize(
    "exc",
    [
        OSError(errno.ENOSPC, os.strerror(errno.ENOSPC)),
        sqlite3.OperationalError("database or disk is full"),
    ],
    ids=["oserror", "sqlite"],
)
def test_disk_full_in_the_writers_words_is_exit_2(case, capsys, monkeypatch, exc):
    monkeypatch.setattr(geopackage, "add_attribute_table", _raise(exc))
    case.run(capsys)
    case.error(f"no space left on device while writing the output (file {case.out})")


def test_disk_full_that_gdal_does_not_name_is_found_by_asking_the_file_system(
    case, capsys, monkeypatch
):
    """GDAL says only "Failed to commit transaction"; the file system says it is full."""
    errors = pytest.importorskip("pyogrio.errors")
    real = os.statvfs

    class Full:
        def __init__(self, actual):
            self.f_frsize, self.f_bavail = actual.f_frsize, 0

    def statvfs(path):
        return Full(real(path)) if Path(path) == case.outdir else real(path)

    monkeypatch.setattr(os, "statvfs", statvfs)
    failed = errors.DataSourceError("Failed to commit transaction")
    monkeypatch.setattr(geopackage, "add_attribute_table", _raise(failed))
    case.run(capsys)
    case.error(f"no space left on device while writing the output (file {case.out})")


def test_an_unexplained_writer_error_with_room_on_disk_stays_an_internal_error(
    case, capsys, monkeypatch
):
    errors = pytest.importorskip("pyogrio.errors")
    failed = errors.DataSourceError("Failed to commit transaction")
    monkeypatch.setattr(geopackage, "add_attribute_table", _raise(failed))
    monkeypatch.setattr(outputs, "_file_size_limit", lambda: None)
    case.run(capsys)
    assert case.code == 1 and "internal error: DataSourceError" in case.stderr
    assert list(case.outdir.iterdir()) == []


def test_the_table_spill_on_a_full_disk_is_exit_2(case, capsys, monkeypatch):
    monkeypatch.setattr(geopackage, "_insert_rows", _raise(sqlite3.OperationalError("disk full")))
    case.run(capsys, "--gauges-per-group", "1")
    case.error("no space left on device while keeping the result tables on disk")


@pytest.mark.skipif(os.name != "posix", reason="RLIMIT_FSIZE is POSIX")
@pytest.mark.parametrize(
    "extra, words",
    [
        ([], "while writing the output"),
        (["--gauges-per-group", "1"], "while "),  # the groups' files or the tables on disk
    ],
)
def test_a_file_size_limit_is_exit_2_in_a_real_process(case, tmp_path, extra, words):
    """A real process under ``ulimit -f``: the writers fail with EFBIG (Python ignores
    SIGXFSZ) and say it in their own words; the run says it in ours."""
    temp = tmp_path / "tmp"
    temp.mkdir()
    limit = 60_000  # bytes: less than the GeoPackage and the group files need

    def limited():
        import resource

        resource.setrlimit(resource.RLIMIT_FSIZE, (limit, limit))

    before = digests(case.inputs)
    done = subprocess.run(
        [sys.executable, "-m", "recharge_atlas", *run_args(case.paths, case.out, *extra)],
        capture_output=True,
        text=True,
        timeout=600,
        preexec_fn=limited,
        env={**os.environ, "TMPDIR": str(temp)},
    )
    assert done.returncode == 2, done.stderr
    lines = [line for line in done.stderr.splitlines() if line.startswith("recharge-atlas")]
    assert len(lines) == 1 and "file size limit" in lines[0] and words in lines[0], lines
    assert "Traceback" not in done.stderr
    assert list(case.outdir.iterdir()) == [] and list(temp.iterdir()) == []
    assert digests(case.inputs) == before


# --------------------------------------------------------------------------- 11: demo folder


def test_demo_onto_a_file_is_exit_2(tmp_path, capsys):
    target = tmp_path / "results"
    target.write_text("a file the user keeps")
    assert main(["demo", "--out", str(target)]) == 2
    err = capsys.readouterr().err
    assert (
        err.strip()
        == f"recharge-atlas: error: the demo output path is a file, not a folder (file {target})"
    )
    assert target.read_text() == "a file the user keeps"


def test_demo_below_a_file_is_exit_2(tmp_path, capsys):
    (tmp_path / "results").write_text("a file")
    target = tmp_path / "results" / "demo"
    assert main(["demo", "--out", str(target)]) == 2
    err = capsys.readouterr().err
    assert "the demo output folder could not be made: Not a directory" in err, err


def test_demo_in_a_read_only_folder_is_exit_2(tmp_path, capsys, monkeypatch):
    parent = tmp_path / "locked"
    parent.mkdir()
    parent.chmod(0o555)
    try:
        if os.geteuid() == 0:  # root may write anywhere: make mkdir see what a user sees
            real = Path.mkdir

            def mkdir(self, *args, **kwargs):
                if self.parent == parent:
                    raise PermissionError(errno.EACCES, os.strerror(errno.EACCES), str(self))
                return real(self, *args, **kwargs)

            monkeypatch.setattr(Path, "mkdir", mkdir)
        assert main(["demo", "--out", str(parent / "demo")]) == 2
        err = capsys.readouterr().err
        assert "the demo output folder could not be made: Permission denied" in err, err
        assert "Traceback" not in err
    finally:
        parent.chmod(0o755)


# --------------------------------------------------------------------------- 15: long names


def test_a_long_name_that_fits_is_written(case, capsys):
    """250 characters fit a 255-byte file system; the temporary names must fit too."""
    case.out = case.outdir / ("r" * 245 + ".gpkg")
    case.run(capsys)
    case.result()


def test_a_name_too_long_fails_before_the_work(case, capsys, monkeypatch):
    monkeypatch.setattr(pipeline, "run_atlas", _raise(AssertionError("the run started")))
    case.out = case.outdir / ("r" * 300 + ".gpkg")
    case.run(capsys)
    text = case.error("the output file name is too long for the file system (305 bytes")
    assert "choose a shorter name" in text


def test_a_map_name_too_long_fails_before_the_work(case, capsys, monkeypatch):
    monkeypatch.setattr(pipeline, "run_atlas", _raise(AssertionError("the run started")))
    case.run(capsys, "--map", str(case.outdir / ("m" * 300 + ".png")))
    case.error("the map file name is too long for the file system")


# --------------------------------------------------------------------------- 16: what is there


def test_a_read_only_output_is_refused(case, capsys):
    earlier = case.paths["gauges"].read_bytes()
    case.out.write_bytes(earlier)
    case.out.chmod(stat.S_IRUSR | stat.S_IRGRP | stat.S_IROTH)
    try:
        case.run(capsys)
        assert case.code == 2, case.stderr
        assert case.errors == [
            f"recharge-atlas: error: the output file exists and is read-only; it is not "
            f"replaced (file {case.out})"
        ]
        assert case.out.read_bytes() == earlier
        assert [p.name for p in case.outdir.iterdir()] == [case.out.name]
    finally:
        case.out.chmod(0o644)


@pytest.mark.parametrize(
    "option, name, kind",
    [("--out", "recharge.gpkg", "GeoPackage"), ("--map", "map.png", "PNG image")],
)
def test_a_file_of_another_format_is_not_replaced(case, capsys, option, name, kind):
    target = case.outdir / name
    target.write_text("notes the user keeps")
    extra = [option, str(target)] if option == "--map" else []
    case.run(capsys, *extra)
    assert case.code == 2, case.stderr
    assert f"exists and is not a {kind}, so it is not replaced" in case.stderr
    assert target.read_text() == "notes the user keeps"
    assert [p.name for p in case.outdir.iterdir()] == [name]


@pytest.mark.parametrize("earlier", ["geopackage", "empty"])
def test_an_earlier_geopackage_or_an_empty_file_is_replaced(case, capsys, earlier):
    case.out.write_bytes(case.paths["gauges"].read_bytes() if earlier == "geopackage" else b"")
    case.run(capsys)
    layer = case.result()
    assert "area_km2" in layer.columns


@pytest.mark.parametrize(
    "words",
    [
        "no space left on device while writing the output",
        "file size limit",
        "the output file exists and is read-only",
        "is not a GeoPackage, so it is not replaced",
        "file name is too long for the file system",
        "`143`: stopped by SIGTERM",
        "the next run removes what it left",
    ],
)
def test_readme_says_what_to_do(words):
    # The troubleshooting page of the docs (the README points to it).
    guide = Path(__file__).resolve().parents[1] / "docs" / "troubleshooting.md"
    readme = guide.read_text(encoding="utf-8")
    section = readme.split("## When things go wrong", 1)[1]
    assert words in section.replace("\n", " ")
