"""A throwaway PostgreSQL/PostGIS server for tests: ``initdb`` and ``pg_ctl`` from Debian's
PostgreSQL 15, a data folder under the test's temporary folder, listening only on a Unix
socket there (no TCP at all), run as the unprivileged ``postgres`` user when the tests run as
root (initdb refuses root). Skipped when PostgreSQL, PostGIS or psycopg is missing."""

from __future__ import annotations

import os
import shutil
import subprocess
import tempfile
from pathlib import Path

import pandas as pd
import pytest

BIN = Path("/usr/lib/postgresql/15/bin")
POSTGIS_CONTROL = Path("/usr/share/postgresql/15/extension/postgis.control")
SUPERUSER = "atlas_admin"


class Server:
    def __init__(self, base: Path):
        self._as = []
        if os.geteuid() == 0:
            # The test's own folder is root's alone: the server gets one the postgres user
            # may reach, removed when it stops.
            self._as = ["runuser", "-u", "postgres", "--"]
            base = Path(tempfile.mkdtemp(prefix="recharge-atlas-pg-"))
        self.base = base
        self.data = base / "data"
        self.socket = base / "socket"

    def _run(self, *args, check=True):
        return subprocess.run(
            [*self._as, *map(str, args)], capture_output=True, text=True, check=check, timeout=120
        )

    def start(self):
        self.base.mkdir(parents=True, exist_ok=True)
        self.socket.mkdir(exist_ok=True)
        if self._as:
            shutil.chown(self.base, "postgres")
            shutil.chown(self.socket, "postgres")
            os.chmod(self.base, 0o755)
        self._run(BIN / "initdb", "-D", self.data, "-U", SUPERUSER, "--auth=trust", "-E", "UTF8")
        options = f"-c listen_addresses='' -k {self.socket} -c fsync=off"
        self._run(BIN / "pg_ctl", "-D", self.data, "-o", options, "-w", "-l",
                  self.base / "log", "start")  # fmt: skip
        return self

    def stop(self):
        self._run(BIN / "pg_ctl", "-D", self.data, "-m", "immediate", "-w", "stop", check=False)
        if self._as:
            shutil.rmtree(self.base, ignore_errors=True)

    def uri(self, database="hydro", user=SUPERUSER, password=None):
        who = user if password is None else f"{user}:{password}"
        return f"postgresql://{who}@/{database}?host={self.socket}"

    def connect(self, database="hydro", user=SUPERUSER):
        import psycopg

        return psycopg.connect(self.uri(database, user), autocommit=True)


def start_or_skip(base: Path) -> Server:
    required = os.environ.get("RECHARGE_ATLAS_QGIS_REQUIRED") == "1"  # CI: never skip
    missing = []
    try:
        import psycopg  # noqa: F401
    except ImportError:
        missing.append("psycopg")
    if not (BIN / "initdb").exists() or not POSTGIS_CONTROL.exists():
        missing.append("PostgreSQL 15 with PostGIS")
    if missing:
        text = f"{' and '.join(missing)} not installed (make test installs them)"
        pytest.fail(text) if required else pytest.skip(text)
    server = Server(base).start()
    with server.connect("postgres") as conn:
        conn.execute("CREATE DATABASE hydro")
    with server.connect() as conn:
        conn.execute("CREATE EXTENSION postgis")
    return server


def load_frame(conn, schema, table, frame, srid=None):
    """Put ``frame`` into ``schema.table`` with plain SQL (geometry as WKB), for the tests."""
    from psycopg import sql
    from shapely import wkb

    geometry = srid is not None
    columns = [c for c in frame.columns if not (geometry and c == "geometry")]
    kinds = {c: ("double precision" if frame[c].dtype.kind == "f" else "text") for c in columns}
    conn.execute(sql.SQL("CREATE SCHEMA IF NOT EXISTS {}").format(sql.Identifier(schema)))
    parts = [sql.SQL("{} " + kinds[c]).format(sql.Identifier(c)) for c in columns]
    if geometry:
        parts.append(sql.SQL(f"geom geometry(Geometry, {int(srid)})"))
    conn.execute(
        sql.SQL("CREATE TABLE {} ({})").format(
            sql.Identifier(schema, table), sql.SQL(", ").join(parts)
        )
    )
    marks = [sql.Placeholder()] * len(columns)
    if geometry:
        marks.append(sql.SQL(f"ST_GeomFromWKB(%s, {int(srid)})"))
    names = [sql.Identifier(c) for c in columns] + ([sql.Identifier("geom")] if geometry else [])
    insert = sql.SQL("INSERT INTO {} ({}) VALUES ({})").format(
        sql.Identifier(schema, table), sql.SQL(", ").join(names), sql.SQL(", ").join(marks)
    )
    rows = []
    for record in frame.itertuples(index=False):
        values = dict(zip(frame.columns, record))
        row = [None if pd.isna(values[c]) else values[c] for c in columns]
        if geometry:
            row.append(wkb.dumps(values["geometry"]))
        rows.append(row)
    with conn.cursor() as cursor:
        cursor.executemany(insert, rows)
