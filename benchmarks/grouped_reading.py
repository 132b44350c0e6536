"""Peak memory of a run that reads its discharge table a gauge group at a time; prints figures.

Usage::

    python benchmarks/grouped_reading.py --gauges 2000 --years 30 [--gauges-per-group 250]
                                         [--format parquet|csv|postgres|both] [--seed 1]

``postgres`` loads the table into a throwaway PostgreSQL server (tests/pg_server.py: Debian's
PostgreSQL 15 and PostGIS, a Unix socket only) and reads it on the server a gauge group at a
time; ``both`` measures the Parquet run and the database run one after the other and prints
their figures side by side.

It generates a synthetic network (in a child process), writes its discharge table as Parquet
(or CSV), then runs the command line's own path (``run_files``: read the layers, read the table
in gauge groups, compute, write the GeoPackage) in a fresh process that measures its resident
memory. The last lines are:

* ``whole_table_bytes`` and ``group_table_bytes``: the table as pandas holds it in memory
  (``memory_usage(deep=True)``), whole and for one gauge group;
* ``peak_above_baseline_bytes``: the run's peak resident memory above what the process held
  after its imports and before reading anything;
* ``group_memory_ratio=<peak above baseline / one group's table>``: the peak against the data
  processed at once. The run's event, period and segment rows wait in a temporary file, so they
  do not count; each gauge's annual rows and recession segments stay in memory and do.
"""

from __future__ import annotations

import argparse
import json
import subprocess
import sys
import tempfile
import time
from pathlib import Path

import numpy as np

HERE = Path(__file__).resolve().parent


def _write_table(folder, fmt):
    """The network's flows as a long table (gauge id, date, discharge) in ``fmt``; its size in
    memory whole and per gauge."""
    import pandas as pd

    meta = json.loads((Path(folder) / "meta.json").read_text())
    flow = np.load(Path(folder) / "flow.npy")
    n_gauges, n_days = flow.shape
    table = pd.DataFrame(
        {
            "gauge_id": np.repeat(np.asarray(meta["ids"], dtype=object), n_days),
            "date": np.tile(
                pd.date_range(meta["start"], periods=n_days, freq="D").to_numpy(), n_gauges
            ),
            "discharge": flow.reshape(-1),
        }
    )
    whole = int(table.memory_usage(deep=True).sum())
    path = Path(folder) / f"discharge.{fmt}"
    if fmt == "parquet":
        table.to_parquet(path, index=False)
    else:
        table.to_csv(path, index=False, date_format="%Y-%m-%d")
    return path, whole, whole / n_gauges


def _load_postgres(folder, server):
    """The network's flows as table ``public.discharge`` of the server (COPY of CSV text, a
    gauge group at a time); returns the source string the command line takes."""
    import io

    import pandas as pd

    meta = json.loads((Path(folder) / "meta.json").read_text())
    flow = np.load(Path(folder) / "flow.npy")
    n_gauges, n_days = flow.shape
    dates = pd.date_range(meta["start"], periods=n_days, freq="D").strftime("%Y-%m-%d")
    with server.connect() as conn:
        conn.execute(
            "CREATE TABLE discharge (gauge_id text, date date, discharge double precision)"
        )
        with conn.cursor().copy("COPY discharge FROM STDIN (FORMAT csv)") as copy:
            for start in range(0, n_gauges, 100):
                part = slice(start, min(start + 100, n_gauges))
                ids = np.asarray(meta["ids"], dtype=object)[part]
                block = pd.DataFrame(
                    {
                        "gauge_id": np.repeat(ids, n_days),
                        "date": np.tile(dates.to_numpy(), len(ids)),
                        "discharge": flow[part].reshape(-1),
                    }
                )
                text = io.StringIO()
                block.to_csv(text, index=False, header=False)
                copy.write(text.getvalue())
        conn.execute("CREATE INDEX ON discharge (gauge_id)")
        conn.execute("ANALYZE discharge")
    return server.uri() + "|layername=public.discharge"


def _measure(folder, table_path, per_group):
    """Run in a fresh process: baseline after imports, then the run, then the peak (bytes)."""
    from run import _peak_rss_bytes as peak_rss_bytes
    from run import _reset_peak as reset_peak
    from run import _rss_bytes as rss_bytes

    import recharge_atlas.algorithms.maps  # noqa: F401  (imports outside the measure)
    from recharge_atlas.algorithms import files
    from recharge_atlas.algorithms.pipeline import Settings
    from recharge_atlas.cli import run_files

    if table_path.endswith(".parquet"):
        import pyarrow.compute  # noqa: F401
        import pyarrow.parquet  # noqa: F401
    files.read_layer(Path(folder) / "gauges.gpkg", "gauges")  # loads the layer readers

    baseline = rss_bytes()
    reset_peak()
    start = time.perf_counter()
    run_files(
        Path(folder) / "gauges.gpkg",
        Path(folder) / "catchments.gpkg",
        table_path,
        Path(folder) / "result.gpkg",
        Settings(),
        gauges_per_group=per_group,
    )
    seconds = time.perf_counter() - start
    return {"baseline": baseline, "peak": max(peak_rss_bytes(), baseline), "seconds": seconds}


def _report(args, fmt, folder, table_path, whole, per_gauge, size):
    """Measure one run in a fresh process and print its figures."""
    measured = subprocess.run(
        [sys.executable, __file__, "--measure", folder, str(table_path),
         str(args.gauges_per_group)],
        check=True, capture_output=True, text=True,
    )  # fmt: skip
    figures = json.loads(measured.stdout.strip().splitlines()[-1])
    # 0 gauges per group: the whole table at once (for comparison).
    group = per_gauge * min(args.gauges_per_group or args.gauges, args.gauges)
    above = figures["peak"] - figures["baseline"]
    gauge_years = args.gauges * args.years
    print(
        f"== {fmt}: {args.gauges} gauges x {args.years} years, table {size}, "
        f"{args.gauges_per_group} gauges per group"
    )
    print(
        f"run_seconds={figures['seconds']:.1f} "
        f"({gauge_years / figures['seconds']:,.0f} gauge-years/s, one process)"
    )
    print(f"whole_table_bytes={whole:,.0f}")
    print(f"group_table_bytes={group:,.0f}")
    print(f"peak_above_baseline_bytes={above:,.0f}")
    print(f"group_memory_ratio={above / group:.2f}")


def main(argv=None):
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--gauges", type=int, default=1000)
    parser.add_argument("--years", type=int, default=30)
    parser.add_argument("--gauges-per-group", type=int, default=250)
    parser.add_argument(
        "--format", choices=("parquet", "csv", "postgres", "both"), default="parquet"
    )
    parser.add_argument("--seed", type=int, default=1)
    parser.add_argument("--measure", nargs=3, help=argparse.SUPPRESS)
    args = parser.parse_args(argv)
    if args.measure:
        folder, table_path, per_group = args.measure
        print(json.dumps(_measure(folder, table_path, int(per_group))))
        return 0

    with tempfile.TemporaryDirectory(prefix="recharge-atlas-groups-bench-") as folder:
        subprocess.run(
            [
                sys.executable,
                str(HERE / "run.py"),
                "--gauges",
                str(args.gauges),
                "--years",
                str(args.years),
                "--seed",
                str(args.seed),
                "--generate-into",
                folder,
            ],
            check=True,
        )
        formats = ["parquet", "postgres"] if args.format == "both" else [args.format]
        server = None
        try:
            for fmt in formats:
                table_path, whole, per_gauge = _write_table(
                    folder, "parquet" if fmt == "postgres" else fmt
                )
                size = f"{table_path.stat().st_size / 1e6:,.0f} MB on disk as {table_path.suffix}"
                if fmt == "postgres":
                    sys.path.insert(0, str(HERE.parent / "tests"))
                    from pg_server import start_or_skip

                    server = start_or_skip(Path(folder) / "pg")
                    loading = time.perf_counter()
                    table_path = _load_postgres(folder, server)
                    size = f"loaded into PostgreSQL in {time.perf_counter() - loading:.0f} s"
                _report(args, fmt, folder, table_path, whole, per_gauge, size)
        finally:
            if server is not None:
                server.stop()
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
