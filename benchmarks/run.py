"""Speed and memory of the core on a synthetic gauge network; prints figures, asserts nothing.

Usage::

    python benchmarks/run.py --gauges 2000 --years 30 [--seed 1] [--workers 2] [--skip-end-to-end]
                             [--gaps-per-year 0] [--repeat 2]

It generates the network in a child process (so its temporaries do not count), loads the daily
flows, and measures in this one process:

* the floor: one vectorised pass over all values in memory (log10 and the day-to-day difference),
  best of three;
* the full in-memory computation for every gauge: recession index, events, displacement,
  annual sums, baseflow (the pipeline's per-gauge work, without reading or writing files);
* the same with ``--workers`` processes;
* each of these two best of ``--repeat`` runs (2 by default), taken in turns;
* end to end: the discharge table as Parquet on disk to the GeoPackage, in gauge-years per second.

``--gaps-per-year G`` blanks G gaps of 1 to 10 days per gauge-year at random (real records
have gaps; the generated ones have none), which shows what gaps cost.

The last lines are ``limit_ratio=<full/floor>``, ``memory_ratio=<peak RSS above baseline / data
bytes>`` and ``workers_speedup=<serial time / time with the workers>``.
"""

from __future__ import annotations

import argparse
import json
import os
import platform
import resource
import subprocess
import sys
import tempfile
import time
from pathlib import Path

import numpy as np


def _rss_bytes():
    with open("/proc/self/status", encoding="ascii") as status:
        for line in status:
            if line.startswith("VmRSS:"):
                return int(line.split()[1]) * 1024
    return 0


def _peak_rss_bytes():
    """Peak resident memory since the last :func:`_reset_peak` (VmHWM on Linux)."""
    with open("/proc/self/status", encoding="ascii") as status:
        for line in status:
            if line.startswith("VmHWM:"):
                return int(line.split()[1]) * 1024
    return resource.getrusage(resource.RUSAGE_SELF).ru_maxrss * 1024  # kB on Linux


def _reset_peak():
    """Start measuring the peak afresh (Linux: writing 5 to clear_refs resets VmHWM)."""
    try:
        with open("/proc/self/clear_refs", "w", encoding="ascii") as handle:
            handle.write("5")
    except OSError:
        pass


def generate(folder, gauges, years, seed):
    """Write the network's flows, dates and areas into ``folder`` (run in a child process)."""
    from recharge_atlas.algorithms.files import write_layer
    from recharge_atlas.sample_layers.generate import make_network

    network = make_network(gauges, years, seed=seed)
    np.save(Path(folder) / "flow.npy", network.flow)
    write_layer(network.gauges, Path(folder) / "gauges.gpkg", "gauges")
    write_layer(network.catchments, Path(folder) / "catchments.gpkg", "catchments")
    meta = {
        "start": str(network.dates[0].date()),
        "days": int(network.dates.size),
        "ids": list(network.gauges["gauge_id"]),
    }
    (Path(folder) / "meta.json").write_text(json.dumps(meta))


def add_gaps(flow, per_year, seed):
    """Blank ``per_year`` gaps of 1 to 10 days per gauge-year, in place, at random."""
    if per_year <= 0:
        return
    rng = np.random.default_rng(seed + 1000)
    n_gauges, n_days = flow.shape
    count = int(round(per_year * n_days / 365.25))
    for row in flow:
        for start, length in zip(rng.integers(0, n_days, count), rng.integers(1, 11, count)):
            row[start : start + length] = np.nan


def _records(flow, meta):
    import pandas as pd

    from recharge_atlas.algorithms.discharge import GaugeRecord

    index = pd.date_range(meta["start"], periods=meta["days"], freq="D", name="date")
    return {
        gid: GaugeRecord(gid, pd.Series(flow[i], index=index, copy=False))
        for i, gid in enumerate(meta["ids"])
    }


def _areas(folder):
    import geopandas as gpd

    from recharge_atlas.algorithms.basins import geodesic_area_km2

    catchments = gpd.read_file(Path(folder) / "catchments.gpkg")
    return dict(zip(catchments["gauge_id"], geodesic_area_km2(catchments.geometry)))


def full_computation(records, areas, workers=1):
    """The pipeline's per-gauge work for every gauge, and its tables stacked."""
    from recharge_atlas.algorithms.pipeline import Reporter, Settings, compute_gauges

    settings = Settings().resolved()
    results, _failed = compute_gauges(
        list(records), records, areas, settings, Reporter(), {}, workers=workers, keep_series=False
    )
    return results


def end_to_end(folder, flow, meta, workers):
    """Parquet discharge table on disk to GeoPackage, through the command line's own path."""
    import pandas as pd

    from recharge_atlas.algorithms.pipeline import Settings
    from recharge_atlas.cli import run_files

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
    parquet = Path(folder) / "discharge.parquet"
    table.to_parquet(parquet, index=False)
    del table
    out = Path(folder) / "result.gpkg"
    start = time.perf_counter()
    run_files(
        Path(folder) / "gauges.gpkg",
        Path(folder) / "catchments.gpkg",
        parquet,
        out,
        Settings(workers=workers),
    )
    return time.perf_counter() - start


def main(argv=None):
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--gauges", type=int, default=200)
    parser.add_argument("--years", type=int, default=30)
    parser.add_argument("--seed", type=int, default=1)
    parser.add_argument("--workers", type=int, default=2)
    parser.add_argument("--skip-end-to-end", action="store_true")
    parser.add_argument("--gaps-per-year", type=float, default=0.0)
    parser.add_argument(
        "--repeat", type=int, default=2, help="best of this many runs, serial and parallel"
    )
    parser.add_argument("--generate-into", help=argparse.SUPPRESS)
    args = parser.parse_args(argv)
    if args.generate_into:
        generate(args.generate_into, args.gauges, args.years, args.seed)
        return 0

    with tempfile.TemporaryDirectory(prefix="recharge-atlas-bench-") as folder:
        start = time.perf_counter()
        subprocess.run(
            [
                sys.executable,
                __file__,
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
        generation = time.perf_counter() - start
        meta = json.loads((Path(folder) / "meta.json").read_text())
        areas = _areas(folder)
        flow = np.load(Path(folder) / "flow.npy")
        add_gaps(flow, args.gaps_per_year, args.seed)
        records = _records(flow, meta)
        import recharge_atlas.algorithms.pipeline  # noqa: F401  (imports outside the timings)

        data_bytes = flow.nbytes
        gauge_years = flow.shape[0] * flow.shape[1] / 365.25

        # The floor, best of three (the first pass also pays for fresh memory pages).
        floor = float("inf")
        for _ in range(3):
            start = time.perf_counter()
            logs = np.log10(flow)
            steps = np.diff(logs, axis=1)
            floor = min(floor, time.perf_counter() - start)
            del logs, steps

        baseline = _rss_bytes()
        _reset_peak()
        start = time.perf_counter()
        results = full_computation(records, areas, workers=1)
        full = time.perf_counter() - start
        peak = max(_peak_rss_bytes(), baseline)
        del results

        start = time.perf_counter()
        full_computation(records, areas, workers=args.workers)
        parallel = time.perf_counter() - start
        # Best of --repeat runs each, in turns (this machine's speed wanders by tens of percent).
        for _ in range(args.repeat - 1):
            start = time.perf_counter()
            full_computation(records, areas, workers=1)
            full = min(full, time.perf_counter() - start)
            start = time.perf_counter()
            full_computation(records, areas, workers=args.workers)
            parallel = min(parallel, time.perf_counter() - start)

        e2e = None if args.skip_end_to_end else end_to_end(folder, flow, meta, args.workers)

    print(
        f"machine: {platform.machine()}, {os.cpu_count()} cores, python {platform.python_version()}, numpy {np.__version__}"
    )
    print(
        f"network: {args.gauges} gauges x {args.years} years = {gauge_years:,.0f} gauge-years, {flow.size:,} daily values, {data_bytes / 1e6:,.0f} MB (generated in {generation:.1f} s)"
    )
    if args.gaps_per_year > 0:
        print(f"gaps: {args.gaps_per_year:g} per gauge-year, 1 to 10 days each")
    print(f"timings: floor best of 3 passes; full and parallel best of {args.repeat} runs each")
    print(f"floor_seconds={floor:.3f}")
    print(
        f"full_seconds={full:.3f} ({1000 * full / args.gauges:.2f} ms per gauge, {gauge_years / full:,.0f} gauge-years/s)"
    )
    print(f"workers={args.workers} parallel_seconds={parallel:.3f}")
    print(f"peak_rss_above_baseline_mb={(peak - baseline) / 1e6:,.0f}")
    if e2e is not None:
        print(
            f"end_to_end_seconds={e2e:.2f} (Parquet on disk to GeoPackage, {args.workers} workers): {gauge_years / e2e:,.0f} gauge-years/s"
        )
    print(f"limit_ratio={full / floor:.1f}")
    print(f"memory_ratio={(peak - baseline) / data_bytes:.2f}")
    print(f"workers_speedup={full / parallel:.2f}")
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
