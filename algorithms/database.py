"""PostgreSQL/PostGIS as a source of gauges, catchments and discharge, and as a target.

A source or target is a libpq connection URI with the command line's ``|key=value`` suffix:

* ``postgresql://user@host:5432/hydro|layername=telemetry.daily_flow`` (a table, optionally
  with its schema), or ``postgresql:///hydro?host=/var/run/postgresql|layername=gauges`` for a
  local socket;
* ``postgresql://user@host/hydro|schema=recharge_2026`` as an output: the layers and tables
  keep the names they have in the GeoPackage.

Credentials come from libpq's usual places (environment, service file, password file, or the
URI); they are never printed, logged or recorded (:func:`provenance.without_password`).

Safety: every table, schema and field name goes into SQL as a quoted identifier
(``psycopg.sql.Identifier``) and every value as a parameter; no SQL is built from user text.
A run's outputs are written in one transaction: all of them, or none. Existing tables are
replaced only when the caller asks.

The driver (psycopg 3) is an optional extra: the core imports without it, and a database
source without it is a clear error naming the package to install.
"""

from __future__ import annotations

import numpy as np
import pandas as pd

from .errors import InputError
from .provenance import without_password

#: URI prefixes read as PostgreSQL.
PREFIXES = ("postgresql://", "postgres://")
#: How NULL travels in the CSV the server sends (an empty text stays an empty text).
NULL_TEXT = "\\N"
#: How to get the driver, said when it is missing.
INSTALL = (
    "reading or writing PostgreSQL needs the psycopg package (version 3): "
    "pip install 'psycopg[binary]' (Debian: apt install python3-psycopg)"
)
#: PostgreSQL types of the result columns, by pandas kind.
SQL_TYPES = {
    "b": "boolean",
    "i": "bigint",
    "u": "bigint",
    "f": "double precision",
    "M": "timestamp",
}


def is_database(source) -> bool:
    """Whether ``source`` names a PostgreSQL database rather than a file."""
    return str(source).strip().lower().startswith(PREFIXES)


def split(source):
    """``(uri, options)`` from ``uri|key=value|…``: ``options`` holds ``layername`` and
    ``schema`` when given."""
    parts = str(source).strip().split("|")
    options = {}
    for part in parts[1:]:
        key, _, value = part.partition("=")
        options[key.strip().lower()] = value.strip()
    return parts[0], options


def _driver():
    try:
        import psycopg
        from psycopg import sql
    except ImportError:
        raise InputError(INSTALL) from None
    return psycopg, sql


def describe(source) -> str:
    """The source as it may be shown: the URI with any password hidden."""
    return without_password(source)


def connect(source, what):
    """An open connection to the database of ``source`` (for ``what``: "gauges", …)."""
    psycopg, _sql = _driver()
    uri, _options = split(source)
    try:
        return psycopg.connect(uri)
    except psycopg.Error as exc:
        reason = without_password(str(exc).strip().splitlines()[0] if str(exc).strip() else exc)
        raise InputError(
            f"cannot connect to the database of the {what}: {reason}", file=describe(source)
        ) from None


def table_name(text):
    """``(schema, table)`` of ``schema.table`` or ``table`` (schema None: the search path).
    A name in double quotes keeps its dots and case: ``"My.Schema"."Flow Table"``."""
    text = str(text).strip()
    names, current, quoted, i = [], "", False, 0
    while i < len(text):
        c = text[i]
        if c == '"':
            if quoted and i + 1 < len(text) and text[i + 1] == '"':
                current += '"'
                i += 1
            else:
                quoted = not quoted
        elif c == "." and not quoted:
            names.append(current)
            current = ""
        else:
            current += c
        i += 1
    names.append(current)
    if quoted or not names[-1] or len(names) > 2 or any(not n for n in names):
        raise InputError(f"the table name {text!r} is not schema.table or table")
    return (names[0], names[1]) if len(names) == 2 else (None, names[0])


def _qualified(sql, schema, table):
    if schema is None:
        return sql.Identifier(table)
    return sql.Identifier(schema, table)


def _layername(source, what):
    _uri, options = split(source)
    name = options.get("layername")
    if not name:
        raise InputError(
            f"name the {what} table: add |layername=schema.table to the connection URI",
            file=describe(source),
        )
    return table_name(name)


def _columns(conn, schema, table, source, what):
    """``{column: data type}`` of a table or view, in order; a clear error when absent."""
    rows = conn.execute(
        "SELECT a.attname, format_type(a.atttypid, a.atttypmod) FROM pg_attribute a "
        "WHERE a.attrelid = to_regclass(%s) AND a.attnum > 0 AND NOT a.attisdropped "
        "ORDER BY a.attnum",
        (_regclass_text(schema, table),),
    ).fetchall()
    if not rows:
        shown = table if schema is None else f"{schema}.{table}"
        raise InputError(
            f"the database has no table {shown!r} for the {what} (or no permission to see it)",
            file=describe(source),
        )
    return dict(rows)


def _regclass_text(schema, table):
    """The text ``to_regclass`` reads as that exact schema and table (quoted identifiers)."""

    def quote(name):
        return '"' + name.replace('"', '""') + '"'

    return quote(table) if schema is None else f"{quote(schema)}.{quote(table)}"


def read_table(source, what="discharge table", columns=None):
    """A table (or view) of the database, whole, as a DataFrame (``columns``: only those)."""
    _psycopg, sql = _driver()
    schema, table = _layername(source, what)
    with connect(source, what) as conn:
        available = _columns(conn, schema, table, source, what)
        names = [c for c in (columns or available) if c in available]
        query = sql.SQL("SELECT {} FROM {}").format(
            sql.SQL(", ").join(sql.Identifier(c) for c in names), _qualified(sql, schema, table)
        )
        frame = _copied(conn, sql, query, names, available)
    for name in names:
        kind = available[name]
        if kind == "date" or kind.startswith("timestamp"):
            frame[name] = pd.to_datetime(frame[name])
    return frame


def _copied(conn, sql, query, names, types, categories=()):
    """The rows of ``query`` as a DataFrame, sent by the server as CSV (``COPY … TO STDOUT``)
    and parsed by pandas: a few tens of bytes a row in transit, where rows fetched as Python
    tuples take hundreds. Numbers become floats; other fields stay text (``categories``:
    as categories); NULL is written as ``\\N``, so an empty text stays empty."""
    import io

    buffer = io.BytesIO()
    with conn.cursor().copy(
        sql.SQL("COPY ({}) TO STDOUT (FORMAT csv, NULL '\\N')").format(query)
    ) as copy:
        for data in copy:
            buffer.write(data)
    buffer.seek(0)
    numeric = {
        n for n in names if types.get(n, "") in ("double precision", "real", "integer", "bigint",
                                                 "smallint") or types.get(n, "").startswith("numeric")
    }  # fmt: skip
    dtypes = {n: (float if n in numeric else ("category" if n in categories else str))
              for n in names}  # fmt: skip
    if not buffer.getbuffer().nbytes:
        return pd.DataFrame({n: pd.Series(dtype=float if n in numeric else object) for n in names})
    frame = pd.read_csv(
        buffer, names=names, header=None, dtype=dtypes, keep_default_na=False,
        na_values=[NULL_TEXT],
    )  # fmt: skip
    for name in names:  # PostgreSQL writes booleans as t and f
        if types.get(name) == "boolean":
            frame[name] = frame[name].map({"t": True, "f": False})
    return frame


def _frame(rows, names, types):
    frame = pd.DataFrame.from_records(rows, columns=names)
    for name in names:  # numeric columns as floats or ints, whatever the driver gave
        kind = types.get(name, "")
        if kind in ("double precision", "real") or kind.startswith("numeric"):
            frame[name] = pd.to_numeric(frame[name], errors="coerce").astype(float)
        elif kind == "date" or kind.startswith("timestamp"):
            frame[name] = pd.to_datetime(frame[name])
    return frame


def read_layer(source, what="layer"):
    """A PostGIS table with geometry as a GeoDataFrame (its CRS from the SRID)."""
    import geopandas as gpd

    _psycopg, sql = _driver()
    schema, table = _layername(source, what)
    with connect(source, what) as conn:
        available = _columns(conn, schema, table, source, what)
        geometry = [c for c, kind in available.items() if kind.startswith("geometry")]
        if not geometry:
            raise InputError(f"the {what} table has no geometry column", file=describe(source))
        geom = geometry[0]
        others = [c for c in available if c not in geometry]
        query = sql.SQL("SELECT {}, ST_AsBinary({}), ST_SRID({}) FROM {}").format(
            sql.SQL(", ").join(sql.Identifier(c) for c in others) if others else sql.SQL("1"),
            sql.Identifier(geom),
            sql.Identifier(geom),
            _qualified(sql, schema, table),
        )
        with conn.cursor() as cursor:
            cursor.execute(query)
            rows = cursor.fetchall()
        srids = {r[-1] for r in rows if r[-1]}
        crs = _crs(conn, next(iter(srids))) if len(srids) == 1 else None
    frame = _frame([r[: len(others)] for r in rows], others, available)
    shapes = [_from_wkb(r[len(others) or 1]) for r in rows]
    return gpd.GeoDataFrame(frame, geometry=shapes, crs=crs)


def _from_wkb(data):
    if data is None:
        return None
    from shapely import wkb

    return wkb.loads(bytes(data))


def _crs(conn, srid):
    """The CRS of an SRID: EPSG when the server says so, else its WKT."""
    row = conn.execute(
        "SELECT auth_name, auth_srid, srtext FROM spatial_ref_sys WHERE srid = %s", (srid,)
    ).fetchone()
    if row is None:
        return None
    auth, code, wkt = row
    if str(auth).upper() == "EPSG" and code:
        return f"EPSG:{code}"
    return wkt or None


def discharge_groups(source, gauge_field, gauge_ids, gauges_per_group, columns):
    """Read a discharge table on the server a gauge group at a time: only ``columns`` and
    only the rows of each group's gauges (``gauge_ids``, as text), so memory holds one group.
    Gauge ids are compared as text, whatever the column's type."""
    _psycopg, sql = _driver()
    schema, table = _layername(source, "discharge table")
    ids = [str(g) for g in gauge_ids]
    size = max(int(gauges_per_group), 1)
    with connect(source, "discharge table") as conn:
        available = _columns(conn, schema, table, source, "discharge table")
        if gauge_field not in available:
            raise InputError(
                "the discharge table has no such field", field=gauge_field, file=describe(source)
            )
        names = [c for c in dict.fromkeys([gauge_field, *columns]) if c in available]
        gauge = sql.Identifier(gauge_field)
        compare = (
            gauge if available[gauge_field] in ("text",) else sql.SQL("{}::text").format(gauge)
        )
        # Gauges and days repeat over a group: held once each, as categories.
        categories = {gauge_field, *(c for c in names if available[c] == "date")}
        for start in range(0, len(ids), size):
            # The group's ids go in as one array value, quoted by the driver.
            query = sql.SQL("SELECT {} FROM {} WHERE {} = ANY({})").format(
                sql.SQL(", ").join(sql.Identifier(c) for c in names),
                _qualified(sql, schema, table),
                compare,
                sql.Literal(ids[start : start + size]),
            )
            yield _copied(conn, sql, query, names, available, categories)


# ------------------------------------------------------------------------------- writing


#: PostgreSQL types of the GeoPackage column kinds a run's kept tables have (files.TableSpill).
SPILL_TYPES = {
    "DATE": "date",
    "DATETIME": "timestamp",
    "BOOLEAN": "boolean",
    "INTEGER": "bigint",
    "DOUBLE": "double precision",
    "TEXT": "text",
}


def write_results(result, target, provenance=None, overwrite=False, daily=False, spill=None):
    """Write a run's layers and tables into schema ``|schema=NAME`` of the target database,
    in one transaction (all or nothing), under the GeoPackage's names.

    The schema is created when missing. A table that exists already is an error unless
    ``overwrite``; then it is replaced. A write the role has no privilege for is an error
    naming the schema, and nothing is written. Tables a large run kept on disk as it went
    (``spill``, a :class:`files.TableSpill`) are copied from there a slice at a time.
    """
    from . import files

    psycopg, sql = _driver()
    uri, options = split(target)
    schema = options.get("schema")
    if not schema:
        raise InputError(
            "name the schema to write into: add |schema=NAME to the connection URI",
            file=describe(target),
        )
    layers = [("catchments", result.catchments)]
    if getattr(result, "subbasins", None) is not None:
        layers.append(("subbasins", result.subbasins))
    incremental = result.incremental_areas()
    if len(incremental):
        layers.append(("incremental_areas", incremental))
    tables = [(name, getattr(result, attribute)) for name, attribute, _ in files.RESULT_TABLES]
    if daily:
        tables.append(("daily", result.daily()))
    if provenance is not None:
        tables.append(("run", provenance.table()))
    conn = connect(target, "output")
    try:
        with conn.transaction():
            conn.execute(sql.SQL("CREATE SCHEMA IF NOT EXISTS {}").format(sql.Identifier(schema)))
            for name, _ in layers + tables:
                _replace_or_refuse(conn, sql, schema, name, overwrite, target)
            for name, layer in layers:
                _write_frame(conn, sql, schema, name, layer, geometry=True)
            for name, table in tables:
                if spill is not None and spill.holds(name):
                    _write_spilled(conn, sql, schema, name, spill)
                else:
                    _write_frame(conn, sql, schema, name, table, geometry=False)
    except psycopg.errors.InsufficientPrivilege as exc:
        raise InputError(
            f"no permission to write into schema {schema!r} of the database: "
            f"{without_password(str(exc).splitlines()[0])}; nothing was written",
            file=describe(target),
        ) from None
    except psycopg.Error as exc:
        raise InputError(
            f"the database refused the results ({without_password(str(exc).splitlines()[0])}); "
            "nothing was written",
            file=describe(target),
        ) from None
    finally:
        conn.close()
    return describe(target)


def _replace_or_refuse(conn, sql, schema, name, overwrite, target):
    exists = conn.execute("SELECT to_regclass(%s)", (_regclass_text(schema, name),)).fetchone()[0]
    if exists is None:
        return
    if not overwrite:
        raise InputError(
            f"table {schema}.{name} exists already; give --overwrite to replace it",
            file=describe(target),
        )
    conn.execute(sql.SQL("DROP TABLE {}").format(sql.Identifier(schema, name)))


def _sql_type(series):
    if pd.api.types.is_bool_dtype(series):
        return "boolean"
    if pd.api.types.is_datetime64_any_dtype(series):
        values = series.dropna()
        return "date" if (values == values.dt.normalize()).all() else "timestamp"
    return SQL_TYPES.get(getattr(series.dtype, "kind", "O"), "text")


def _write_frame(conn, sql, schema, name, frame, geometry):
    """Create ``schema.name`` for ``frame`` and copy its rows in (geometry as EWKB)."""
    columns = [c for c in frame.columns if not (geometry and c == frame.geometry.name)]
    kinds = {c: _sql_type(frame[c]) for c in columns}
    definitions = [
        sql.SQL("{} {}").format(sql.Identifier(str(c)), sql.SQL(kinds[c])) for c in columns
    ]
    srid = None
    if geometry:
        srid = _srid(frame)
        definitions.append(sql.SQL("geom geometry(Geometry, {})").format(sql.Literal(srid or 0)))
    conn.execute(
        sql.SQL("CREATE TABLE {} (fid bigserial PRIMARY KEY, {})").format(
            sql.Identifier(schema, name), sql.SQL(", ").join(definitions)
        )
    )
    targets = [sql.Identifier(str(c)) for c in columns] + (
        [sql.Identifier("geom")] if geometry else []
    )
    copy = sql.SQL("COPY {} ({}) FROM STDIN").format(
        sql.Identifier(schema, name), sql.SQL(", ").join(targets)
    )
    cells = [_cells(frame[c], kinds[c]) for c in columns]
    if geometry:
        cells.append(_ewkb(frame.geometry, srid))
    with conn.cursor().copy(copy) as writer:
        for row in zip(*cells) if cells else ():
            writer.write_row(row)


def _write_spilled(conn, sql, schema, name, spill):
    """Table ``name`` from a run's :class:`files.TableSpill`, in its order."""
    kinds = spill.kinds[name]
    columns = [sql.Identifier(str(c)) for c in kinds]
    definitions = [
        sql.SQL("{} {}").format(sql.Identifier(str(c)), sql.SQL(SPILL_TYPES.get(k, "text")))
        for c, k in kinds.items()
    ]
    conn.execute(
        sql.SQL("CREATE TABLE {} (fid bigserial PRIMARY KEY, {})").format(
            sql.Identifier(schema, name), sql.SQL(", ").join(definitions)
        )
    )
    copy = sql.SQL("COPY {} ({}) FROM STDIN").format(
        sql.Identifier(schema, name), sql.SQL(", ").join(columns)
    )
    booleans = [i for i, k in enumerate(kinds.values()) if k == "BOOLEAN"]
    with conn.cursor().copy(copy) as writer:
        for chunk in spill.batches(name):
            for row in chunk:
                if booleans:
                    row = list(row)
                    for i in booleans:
                        row[i] = None if row[i] is None else bool(row[i])
                writer.write_row(row)


def _cells(series, kind):
    values = series.to_numpy(dtype=object)
    out = []
    for v in values:
        if v is None or (isinstance(v, float) and not np.isfinite(v)) or v is pd.NaT:
            out.append(None)
        elif kind in ("bigint",):
            out.append(None if pd.isna(v) else int(v))
        elif kind in ("date", "timestamp"):
            out.append(None if pd.isna(v) else pd.Timestamp(v).to_pydatetime())
        elif kind == "boolean":
            out.append(None if pd.isna(v) else bool(v))
        elif kind == "double precision":
            out.append(float(v))
        else:
            out.append(None if pd.isna(v) else str(v))
    return out


def _srid(frame):
    crs = frame.crs
    if crs is None:
        return 0
    code = crs.to_epsg()
    return int(code) if code else 0


def _ewkb(geometries, srid):
    from shapely import wkb

    return [
        None if g is None or g.is_empty else wkb.dumps(g, hex=True, srid=srid or None)
        for g in geometries
    ]
