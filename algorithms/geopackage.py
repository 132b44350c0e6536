"""The GeoPackage writer: the layers, the result tables (batched inserts and GeoPackage
bookkeeping), the default style in ``layer_styles``, provenance in ``gpkg_metadata`` and the
``run`` table, figures and CSV; and the spill of a large run's tables to disk.
"""

from __future__ import annotations

import datetime as _dt
import itertools
import os
import sqlite3
from pathlib import Path

import numpy as np
import pandas as pd

from .errors import InputError
from .outputs import (
    atomic_path,
    disk_full,
    temporary_folder,
)

#: The GeoPackage version written (the ``VERSION`` creation option of GDAL's driver). GDAL 3.8
#: and later write 1.4 by default, which GDAL 3.6 (QGIS 3.22 on Debian 12) opens with a warning
#: that it "may only be partially supported"; 1.2 holds everything written here and every
#: supported QGIS reads it cleanly.
GPKG_VERSION = "1.2"


#: Tables of a run's GeoPackage: name, result attribute, description.
RESULT_TABLES = (
    ("annual", "annual", "Recharge, baseflow and storage change by gauge and water year"),
    ("events", "events", "Recharge of each event by recession-curve displacement"),
    ("periods", "periods", "Recharge by gauge and month or season"),
    ("segments", "segments", "Recession segments behind each recession index"),
    (
        "master_recession",
        "master_recession",
        "Recession index by flow level (master recession curve)",
    ),
    ("links", "links", "How each gauge links to a catchment, or why it does not"),
)


def write_layer(frame, path, layer):
    """Write a GeoDataFrame as one layer of a GeoPackage of :data:`GPKG_VERSION` (added to
    the file when it exists)."""
    frame.to_file(path, layer=layer, driver="GPKG", VERSION=GPKG_VERSION)


def write_layer_style(db, layer, name, description, qml, geometry_column="geom"):
    """Store ``qml`` as the default QGIS style of ``layer`` in an open GeoPackage.

    QGIS's convention (QGIS writes the same table when a style is saved "in the datasource
    database"): table ``layer_styles`` with ``f_table_catalog`` and ``f_table_schema`` empty,
    ``f_table_name`` and ``f_geometry_column`` naming the layer, the style document in
    ``styleQML`` and ``useAsDefault`` true on the style QGIS applies when the layer opens. The
    table is listed among the contents as attributes, so GDAL sees it too.
    """
    now = pd.Timestamp.now(tz="UTC").tz_localize(None).floor("s")
    row = {
        "f_table_catalog": "",
        "f_table_schema": "",
        "f_table_name": layer,
        "f_geometry_column": geometry_column,
        "styleName": name,
        "styleQML": qml,
        "styleSLD": "",
        "useAsDefault": True,
        "description": description,
        "owner": "",
        "ui": "",
        "update_time": now + pd.Timedelta(milliseconds=1),  # a time, so DATETIME, not DATE
    }
    frame = pd.DataFrame([row])
    frame["update_time"] = frame["update_time"].astype("datetime64[ns]")
    add_attribute_table(db, "layer_styles", frame, "Styles of the layers, read by QGIS")


#: The GeoPackage metadata extension (OGC 12-128r15, annex F.8): its tables, as the standard
#: gives them, and the URI our own JSON provenance document is filed under.
METADATA_SQL = (
    "CREATE TABLE IF NOT EXISTS gpkg_metadata (id INTEGER CONSTRAINT m_pk PRIMARY KEY ASC NOT "
    "NULL, md_scope TEXT NOT NULL DEFAULT 'dataset', md_standard_uri TEXT NOT NULL, mime_type "
    "TEXT NOT NULL DEFAULT 'text/xml', metadata TEXT NOT NULL DEFAULT '')",
    "CREATE TABLE IF NOT EXISTS gpkg_metadata_reference (reference_scope TEXT NOT NULL, "
    "table_name TEXT, column_name TEXT, row_id_value INTEGER, timestamp DATETIME NOT NULL "
    "DEFAULT (strftime('%Y-%m-%dT%H:%M:%fZ','now')), md_file_id INTEGER NOT NULL, md_parent_id "
    "INTEGER, CONSTRAINT crmr_mfi_fk FOREIGN KEY (md_file_id) REFERENCES gpkg_metadata(id), "
    "CONSTRAINT crmr_mpi_fk FOREIGN KEY (md_parent_id) REFERENCES gpkg_metadata(id))",
    "CREATE TABLE IF NOT EXISTS gpkg_extensions (table_name TEXT, column_name TEXT, "
    "extension_name TEXT NOT NULL, definition TEXT NOT NULL, scope TEXT NOT NULL, CONSTRAINT "
    "ge_tce UNIQUE (table_name, column_name, extension_name))",
)


METADATA_EXTENSION = "http://www.geopackage.org/spec120/#extension_metadata"


PROVENANCE_URI = "urn:recharge-atlas:provenance:1"


def write_provenance(db, provenance):
    """Store where an output came from (a :class:`provenance.Provenance`) in an open
    GeoPackage: as the plain ``run`` table (any SQL user can read it) and as a JSON document
    in the GeoPackage metadata extension, referenced for the whole GeoPackage."""
    add_attribute_table(
        db, "run", provenance.table(), "How this output was made: version, inputs, settings"
    )
    for sql in METADATA_SQL:
        db.execute(sql)
    for table in ("gpkg_metadata", "gpkg_metadata_reference"):
        db.execute(
            "INSERT OR IGNORE INTO gpkg_extensions (table_name, column_name, extension_name, "
            "definition, scope) VALUES (?, NULL, 'gpkg_metadata', ?, 'read-write')",
            (table, METADATA_EXTENSION),
        )
    cursor = db.execute(
        "INSERT INTO gpkg_metadata (md_scope, md_standard_uri, mime_type, metadata) "
        "VALUES ('dataset', ?, 'application/json', ?)",
        (PROVENANCE_URI, provenance.as_json()),
    )
    db.execute(
        "INSERT INTO gpkg_metadata_reference (reference_scope, md_file_id) VALUES ('geopackage', ?)",
        (cursor.lastrowid,),
    )


def write_geopackage(
    result, path, daily=False, spill=None, scheme="quantiles", classes=5, provenance=None
):
    """Write a run's results as one GeoPackage.

    Layers ``catchments``, ``incremental_areas`` (and ``subbasins`` with a subbasin map); tables ``annual``,
    ``events``, ``periods``, ``segments``, ``master_recession`` and ``links``; with
    ``daily=True`` also ``daily`` (flow and baseflow of every day). Tables a large run kept on
    disk as it went (``spill``, a :class:`TableSpill`) are copied from there. The catchments
    layer carries its choropleth of mean annual recharge (classes by ``scheme`` and
    ``classes``) as its default QGIS style (:func:`write_layer_style`). ``provenance`` (a
    :class:`provenance.Provenance`) goes in as the ``run`` table and the GeoPackage's metadata
    (:func:`write_provenance`).
    """
    from .layer_style import recharge_style

    style = recharge_style(result.catchments, scheme=scheme, classes=classes)
    # (name, description, rows): no rows for a table the spill holds.
    tables = [
        (
            name,
            description,
            None if spill is not None and spill.holds(name) else getattr(result, attribute),
        )
        for name, attribute, description in RESULT_TABLES
    ]
    if daily:
        tables.append(("daily", "Daily flow and baseflow by gauge", result.daily()))
    with atomic_path(path) as temp:
        # Started first, before GDAL opens anything: a second process writes some of the
        # larger tables into a file of its own while this one writes the rest.
        helper = _TableHelper.start(temp, [(n, f) for n, _, f in tables if f is not None])
        try:
            write_layer(result.catchments, temp, "catchments")
            if getattr(result, "subbasins", None) is not None:
                write_layer(result.subbasins, temp, "subbasins")
            incremental = result.incremental_areas()
            if len(incremental):
                write_layer(incremental, temp, "incremental_areas")
            db = sqlite3.connect(temp)
            try:
                if spill is not None:
                    db.execute("ATTACH DATABASE ? AS spill", (str(spill.path),))
                with db:
                    # Every table is created in the same order whoever fills it.
                    for name, description, frame in tables:
                        if frame is None:
                            spill.copy_into(db, name, description)
                        elif helper.holds(name):
                            helper.create(db, name, frame, description)
                        else:
                            add_attribute_table(db, name, frame, description)
                    if style is not None:
                        name, title, qml = style
                        write_layer_style(db, "catchments", name, f"Choropleth: {title}", qml)
                    if provenance is not None:
                        write_provenance(db, provenance)
                helper.fill(db)
            finally:
                db.close()
        finally:
            helper.close()
    return Path(path)


#: Table cells (rows × columns) from which a run's tables are shared with a second process.
#: A 2,000-gauge × 30-year run has about 30 million; below a few million the second
#: process would save less than it costs to start.
SHARED_WRITING_CELLS = 4_000_000


class _TableHelper:
    """A second process that writes some of a run's larger tables while this one writes the
    others (where processes fork: Linux, outside QGIS).

    It converts and inserts its tables with the same code (:func:`_create_table`,
    :func:`_insert_rows`) into a SQLite file of its own beside the output; :meth:`fill`
    then copies them into the GeoPackage inside SQLite, rows in the same order, so the file
    holds what one process would have written. Converting cells for SQLite is most of a large
    table's time, and it runs on the second core; the copy costs a tenth of it. Should the
    helper fail in any way, :meth:`fill` writes its tables here as if it had never started
    (a real disk problem then says itself, in this process, in the usual words).
    Measured on the 2-core machine (December 2026, 2,000 gauges × 30 years): the run's
    GeoPackage in 2.6 s instead of 3.35 s.
    """

    def __init__(self, path=None, kinds=None, process=None, receiver=None):
        import time

        self.path, self.kinds = path, kinds or {}  # the helper's tables and their columns
        self.process, self.receiver = process, receiver
        self.pending = {}
        self.started = time.monotonic()

    @classmethod
    def start(cls, temp, tables):
        from .parallel import forks

        cells = {name: len(frame) * max(len(frame.columns), 1) for name, frame in tables}
        if not forks() or sum(cells.values()) < SHARED_WRITING_CELLS:
            return cls()
        # The largest tables first, each to the side with fewer cells so far.
        mine, theirs, names = 0, 0, []
        for name in sorted(cells, key=cells.get, reverse=True):
            if theirs <= mine:
                names.append(name)
                theirs += cells[name]
            else:
                mine += cells[name]
        import multiprocessing

        path = str(temp) + "-tables"
        wanted = [(name, frame, _kinds(frame)) for name, frame in tables if name in names]
        context = multiprocessing.get_context("fork")
        receiver, sender = context.Pipe(duplex=False)
        process = context.Process(
            target=_helper_writes, args=(path, wanted, sender, os.getpid()), daemon=True
        )
        process.start()
        sender.close()
        return cls(path, {name: kinds for name, _, kinds in wanted}, process, receiver)

    def holds(self, name) -> bool:
        return name in self.kinds

    def create(self, db, name, frame, description):
        """Create and list table ``name`` now (its rows come in :meth:`fill`)."""
        kinds = self.kinds[name]
        _create_table(db, name, kinds)
        _register_attributes(db, name, description, len(frame))
        self.pending[name] = (frame, kinds)

    def fill(self, db):
        """The helper's tables' rows into ``db`` (outside a transaction: SQLite attaches a file
        only there): copied from its file, or written here should it have failed."""
        if not self.pending:
            return
        if not self._finished():
            with db:
                for name, (frame, kinds) in self.pending.items():
                    _insert_rows(db, name, frame, kinds)
            return
        db.execute("ATTACH DATABASE ? AS helper", (self.path,))
        try:
            with db:
                for name in self.pending:
                    _copy_rows(db, "helper", name)
        finally:
            db.execute("DETACH DATABASE helper")

    def _finished(self) -> bool:
        """True when the helper wrote every table it was given. A helper that takes far longer
        than this process took for its own share (:data:`HELPER_PATIENCE`) is given up on: it
        may be stuck, and its tables are then written here."""
        import time

        factor, seconds = HELPER_PATIENCE
        patience = factor * (time.monotonic() - self.started) + seconds
        try:
            if not self.receiver.poll(patience):
                return False
            said = self.receiver.recv()
        except (EOFError, OSError):  # it ended without a word
            return False
        self.process.join()
        return said == "done" and self.process.exitcode == 0

    def close(self):
        """End the helper (if it still runs) and remove its file."""
        if self.process is not None:
            if self.process.is_alive():
                self.process.kill()
            self.process.join()
            self.receiver.close()
            self.process = None
        if self.path is not None:
            from .outputs import _remove_leftovers

            _remove_leftovers(self.path)


#: How long the run waits for the second writer once its own share is written: this many
#: times as long as that share took, plus these seconds (it has about as much to do, so a
#: helper that is still at work after that is taken for stuck; our own rule).
HELPER_PATIENCE = (10.0, 60.0)


def _helper_writes(path, tables, sender, parent_pid):
    """In the helper process: ``tables`` (name, frame, column kinds) into a new SQLite file at
    ``path``; says "done", or what went wrong, to the parent."""
    from .parallel import _worker_start

    try:
        _worker_start(parent_pid)  # dies with the parent; the parent handles Ctrl-C
        db = sqlite3.connect(path)
        try:
            db.execute("PRAGMA journal_mode = OFF")  # a scratch file, thrown away after
            db.execute("PRAGMA synchronous = OFF")
            with db:
                for name, frame, kinds in tables:
                    _create_table(db, name, kinds)
                    _insert_rows(db, name, frame, kinds)
        finally:
            db.close()
        sender.send("done")
    except BaseException as exc:  # the parent writes the tables itself
        sender.send(f"{type(exc).__name__}: {exc}")
    finally:
        sender.close()


def save_figure(figure, path, dpi=150, footer=None):
    """Save a matplotlib figure as PNG, atomically; ``footer`` (the version and date of the
    run, :meth:`provenance.Provenance.footer`) is written small in its bottom right corner."""
    if footer:  # just under everything drawn, at its right edge
        from matplotlib.backends.backend_agg import FigureCanvasAgg

        canvas = figure.canvas
        if not hasattr(canvas, "get_renderer"):
            canvas = FigureCanvasAgg(figure)
        box = figure.get_tightbbox(canvas.get_renderer())
        width, height = figure.get_size_inches()
        figure.text(
            box.x1 / width, box.y0 / height - 0.004, footer,
            ha="right", va="top", fontsize=6.5, color="#666666",
        )  # fmt: skip
    with atomic_path(path) as temp:
        figure.savefig(temp, dpi=dpi, format="png", bbox_inches="tight")
    return Path(path)


def write_csv(frame, path):
    """Write a table as CSV, atomically."""
    with atomic_path(path) as temp:
        frame.to_csv(temp, index=False)
    return Path(path)


def _gpkg_type(series):
    if pd.api.types.is_bool_dtype(series):
        return "BOOLEAN"
    if pd.api.types.is_integer_dtype(series):
        return "INTEGER"
    if pd.api.types.is_float_dtype(series):
        return "DOUBLE"
    if pd.api.types.is_datetime64_any_dtype(series):
        if (series.dropna() == series.dropna().dt.normalize()).all():
            return "DATE"
        return "DATETIME"
    return "TEXT"


def _cells(series, kind):
    """A column's values as SQLite takes them (None for missing), converted column-wise."""
    if kind == "DATE":
        values = series.to_numpy(dtype="datetime64[ns]")
        return _with_none(_day_texts(values.astype("datetime64[D]")), np.isnat(values))
    if kind == "DATETIME":
        values = series.to_numpy(dtype="datetime64[ns]")
        # GeoPackage 1.2, Requirement 5: YYYY-MM-DDTHH:MM:SS.SSSZ (GDAL warns on any other).
        text = np.char.add(np.datetime_as_string(values.astype("datetime64[ms]")), "Z")
        return _with_none(text.tolist(), np.isnat(values))
    if kind == "BOOLEAN":
        return series.to_numpy(dtype=bool).astype(np.int64).tolist()
    if kind == "INTEGER":
        if series.hasnans:  # a nullable integer column with missing values
            return [None if pd.isna(v) else int(v) for v in series.to_numpy(dtype=object)]
        return series.to_numpy(dtype=np.int64).tolist()
    if kind == "DOUBLE":
        values = series.to_numpy(dtype=float)
        return _with_none(values.tolist(), ~np.isfinite(values))
    if isinstance(series.dtype, pd.StringDtype):  # text already (pandas 3 reads text so)
        return series.to_numpy(dtype=object, na_value=None).tolist()
    out = series.to_numpy(dtype=object)
    missing = pd.isna(out)
    text = np.array([str(v) for v in out], dtype=object) if len(out) else out
    text[missing] = None
    return text.tolist()


def _day_texts(days):
    """ISO texts (YYYY-MM-DD) of an array of days (datetime64[D]; NaT gives any text).

    Each distinct day of the span is written once and looked up: a run's dates repeat over a
    few decades of days, and writing each one anew was most of the cost of writing its tables.
    """
    numbers = days.view(np.int64)
    known = ~np.isnat(days)
    if not known.any():
        return [None] * days.size
    low, high = int(numbers[known].min()), int(numbers[known].max())
    if high - low > 4 * days.size + 1000:  # few days far apart: write each
        return np.datetime_as_string(days).tolist()
    first, calendar = _CALENDAR
    if not (first <= low and high < first + calendar.size):
        # One calendar serves every slice and date column of a run's tables: it grows to cover
        # the days asked for (a year either side), within a bound.
        last = first + calendar.size - 1
        if calendar.size and max(high, last) - min(low, first) < _CALENDAR_DAYS:
            low, high = min(low, first), max(high, last)
        low, high = low - 366, high + 366
        calendar = np.datetime_as_string(np.arange(low, high + 1).astype("datetime64[D]"))
        first, calendar = low, calendar.astype(object)  # each text made once, then referred to
        _CALENDAR[:] = first, calendar
    return calendar.take(numbers - first, mode="clip").tolist()  # NaT's text is replaced


#: The first day (as a number) and the texts of the calendar :func:`_day_texts` keeps, and the
#: most days it grows to (about 270 years).
_CALENDAR = [0, np.empty(0, dtype=object)]


_CALENDAR_DAYS = 100_000


def _with_none(cells, missing):
    """``cells`` (a list) with None where ``missing`` is True."""
    for i in np.flatnonzero(missing).tolist():
        cells[i] = None
    return cells


def _identifier(name) -> str:
    """A table or column name quoted for SQLite (a double quote inside is doubled)."""
    return '"' + str(name).replace('"', '""') + '"'


#: Rows converted and inserted at a time when a table is written into a GeoPackage.
ROWS_PER_INSERT = 20_000


# Our own writer for the tables, measured against a library (issue 17; ``python
# benchmarks/libraries.py``, 2-core machine, December 2026): the whole GeoPackage of 2,000 gauges
# x 30 years (1.76 million table rows) took 4.2-4.7 s with write_geopackage and 3.8-4.0 s with
# pyogrio.write_dataframe(use_arrow=True) (the same rows, columns, types and values read back;
# GeoPackage 1.2 either way); 500 gauges 0.82-0.93 s against 1.04-1.05 s. Kept, because QGIS's
# Python on Debian 12 has neither pyogrio nor pyarrow (Debian 12 packages neither), one writer
# keeps the command line's and QGIS's outputs identical, and GDAL files its own XML metadata in
# gpkg_metadata, not our JSON provenance document under our URI (the layer_styles and run
# tables it could write).
def add_attribute_table(db, name, frame, description=""):
    """Add a non-spatial table to an open GeoPackage (data type ``attributes``, GPKG 1.2+)."""
    kinds = _kinds(frame)
    _create_table(db, name, kinds)
    _insert_rows(db, name, frame, kinds)
    _register_attributes(db, name, description, len(frame))


def _kinds(frame):
    """The GeoPackage column type of each of ``frame``'s columns."""
    return {column: _gpkg_type(frame[column]) for column in frame.columns}


def _copy_rows(db, source, name):
    """Table ``name``'s rows from the attached database ``source`` into the same, empty table
    of ``main``, in their order and with their feature ids (1 to n, as they were inserted).

    Both tables are made by :func:`_create_table` from the same column kinds, so a plain
    ``INSERT … SELECT *`` lets SQLite copy each stored row as it is (its transfer optimisation)
    instead of taking it apart and building it again: the 1.2 million events of a 2,000-gauge
    run in 0.38 s instead of 0.65 s.
    """
    table = _identifier(name)
    db.execute(f"INSERT INTO main.{table} SELECT * FROM {source}.{table}")


def _create_table(db, name, kinds):
    """(Re)create table ``name`` with a GeoPackage feature id and columns of ``kinds``."""
    # Named in ``main``: an attached database (see TableSpill) may hold a table of that name.
    table = "main." + _identifier(name)
    columns_sql = ", ".join(f"{_identifier(c)} {k}" for c, k in kinds.items())
    db.execute(f"DROP TABLE IF EXISTS {table}")
    db.execute(
        f"CREATE TABLE {table} (fid INTEGER PRIMARY KEY AUTOINCREMENT NOT NULL{', ' if kinds else ''}{columns_sql})"
    )


def _insert_rows(db, name, frame, kinds):
    """Append ``frame``'s rows to table ``name`` (its columns converted as ``kinds`` say).

    Many rows go in one statement (``INSERT … VALUES (…), (…), …``): SQLite then runs a
    statement per hundred rows, not per row, which halves the time a large table takes.
    """
    if not len(frame):
        return
    table = "main." + _identifier(name)
    names = ", ".join(_identifier(c) for c in kinds)
    row = "(" + ", ".join("?" for _ in kinds) + ")"
    width = len(kinds)
    per = max(1, min(ROWS_PER_STATEMENT, _most_parameters(db) // max(width, 1)))

    def statement(rows):
        return f"INSERT INTO {table} ({names}) VALUES " + ", ".join([row] * rows)

    full = statement(per)
    # A slice of rows at a time: the cells exist as Python values only for one slice.
    for start in range(0, len(frame), ROWS_PER_INSERT):
        part = frame.iloc[start : start + ROWS_PER_INSERT]
        cells = list(
            itertools.chain.from_iterable(zip(*[_cells(part[c], kinds[c]) for c in kinds]))
        )
        whole = (len(part) // per) * per * width
        step = per * width
        db.executemany(full, (cells[i : i + step] for i in range(0, whole, step)))
        if whole < len(cells):
            db.execute(statement((len(cells) - whole) // width), cells[whole:])


#: Rows inserted by one SQL statement (fewer when SQLite takes fewer parameters).
ROWS_PER_STATEMENT = 100


def _most_parameters(db):
    """How many parameters one statement may have (999, SQLite's old default, when Python
    cannot ask)."""
    try:
        return int(db.getlimit(sqlite3.SQLITE_LIMIT_VARIABLE_NUMBER))
    except AttributeError:  # Python before 3.11
        return 999


def _register_attributes(db, name, description, rows):
    """List table ``name`` among the GeoPackage's contents, as attributes of ``rows`` rows."""
    now = _dt.datetime.now(_dt.timezone.utc).strftime("%Y-%m-%dT%H:%M:%S.000Z")
    db.execute("DELETE FROM gpkg_contents WHERE table_name = ?", (name,))
    db.execute(
        "INSERT INTO gpkg_contents (table_name, data_type, identifier, description, last_change) VALUES (?, 'attributes', ?, ?, ?)",
        (name, name, description, now),
    )
    has_ogr = db.execute("SELECT 1 FROM sqlite_master WHERE name = 'gpkg_ogr_contents'").fetchone()
    if has_ogr:
        db.execute("DELETE FROM gpkg_ogr_contents WHERE table_name = ?", (name,))
        db.execute(
            "INSERT INTO gpkg_ogr_contents (table_name, feature_count) VALUES (?, ?)",
            (name, int(rows)),
        )


class TableSpill:
    """Result tables kept on disk while a large run goes on, then copied into the GeoPackage.

    A run that reads its discharge table a gauge group at a time hands each group's rows
    here (:meth:`add`) as soon as the group is done, so the result tables never pile up in
    memory. They wait in a temporary SQLite file, already converted as the GeoPackage takes
    them; :func:`write_geopackage` copies them across inside SQLite (:meth:`copy_into`), in
    the order they came. :meth:`close` removes the file (also after a failure).
    """

    def __init__(self):
        self.folder = Path(temporary_folder("tables"))
        self.path = self.folder / "tables.sqlite"
        self.db = sqlite3.connect(self.path)
        self.kinds = {}
        self.rows = {}

    def add(self, name, frame):
        """Append ``frame``'s rows to table ``name`` (created by the first rows it gets)."""
        if not len(frame):
            return
        try:
            if name not in self.kinds:
                self.kinds[name] = _kinds(frame)
                self.rows[name] = 0
                _create_table(self.db, name, self.kinds[name])
            _insert_rows(self.db, name, frame, self.kinds[name])
            self.db.commit()
        except (sqlite3.Error, OSError) as exc:
            full = disk_full(
                exc, self.folder, "keeping the result tables on disk", written=[self.path]
            )
            if full is not None:
                raise full from None
            raise InputError(
                f"the result tables could not be kept on disk while the run goes on: {exc}",
                file=str(self.path),
            ) from None
        self.rows[name] += len(frame)

    def holds(self, name) -> bool:
        return name in self.kinds

    def copy_into(self, db, name, description):
        """Table ``name`` into the open GeoPackage ``db`` (which has this file attached as
        ``spill``), with the same columns and rows in the same order."""
        kinds = self.kinds[name]
        _create_table(db, name, kinds)
        _copy_rows(db, "spill", name)
        _register_attributes(db, name, description, self.rows[name])

    def batches(self, name, rows=50_000):
        """Table ``name``'s rows in their order, a list of tuples at a time (cells as the
        GeoPackage stores them: dates as ISO text, booleans as 0 and 1)."""
        columns = ", ".join(_identifier(c) for c in self.kinds[name])
        cursor = self.db.execute(f"SELECT {columns} FROM {_identifier(name)} ORDER BY fid")
        while True:
            chunk = cursor.fetchmany(rows)
            if not chunk:
                return
            yield chunk

    def close(self):
        self.db.close()
        for leftover in self.folder.glob("*"):
            leftover.unlink()
        self.folder.rmdir()


def read_attribute_table(path, name):
    """Read a non-spatial table written by :func:`add_attribute_table` (for tests and reports)."""
    with sqlite3.connect(f"file:{Path(path)}?mode=ro", uri=True) as db:
        frame = pd.read_sql_query(f"SELECT * FROM {_identifier(name)}", db)
    return frame.drop(columns="fid")
