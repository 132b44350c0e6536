"""Speed and memory of the core on a synthetic gauge network; prints figures, asserts nothing.

Usage::

    python benchmarks/run.py --gauges 2000 --years 30 [--seed 1] [--workers 2] [--skip-end-to-end]
                             [--gaps-per-year 0] [--repeat 2]

It generates the network in a child process (so its temporaries do not count), loads the daily
flows, and measures in this one process:

* the full in-memory computation for every gauge: recession index, events, displacement,
  annual sums, baseflow (the pipeline's per-gauge work, without reading or writing files);
* the same with ``--workers`` processes;
* each of these two best of ``--repeat`` runs (2 by default), taken in turns;

and in fresh processes:

* end to end: the discharge table as Parquet on disk to the GeoPackage, through the command
  line's own path with ``--workers``, its time and its peak memory (the table read whole; the
  faster of two processes, and the higher of their peaks), that run's time in reading,
  tidying, computation and writing (``end_to_end_steps``), and the processor time its
  processes used (``end_to_end_cpu``): divided by the cores, the least wall time that amount
  of work could take, however well its steps overlapped;
* the I/O floor: reading that Parquet table into arrays (pyarrow), plus writing the run's
  layer and tables to a fresh GeoPackage with the simplest correct bulk insert (pyogrio with
  Arrow), each the best of four (two in each of two processes);
* with QGIS installed, ``qgis_process run recharge_atlas:catchmentrecharge`` against
  ``recharge-atlas run`` on the same 200-gauge inputs (CSV) and outputs, start-up included
  (each the best of two, in turns).

``--gaps-per-year G`` blanks G gaps of 1 to 10 days per gauge-year at random (real records
have gaps; the generated ones have none), which shows what gaps cost.

The last lines are the figures users wait for (issue 17): ``io_ratio=<end to end / I/O
floor>`` (target 2 or less), ``qgis_ratio=<qgis_process / command line>`` (target 1.5 or less),
``memory_ratio=<peak RSS of the computation above baseline / data bytes>`` (target 3 or less),
``end_to_end_peak_ratio=<peak of the end-to-end run / the table's numeric bytes>`` (target 3
or less) and ``workers_speedup=<serial time / time with the workers>`` (target 1.4 or more on
2 cores). The old ``limit_ratio`` (against one log10 pass) is retired: one implementation of
the science is kept, and that floor measured nothing users wait for.
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


def _cpu_seconds():
    """Processor time (user and system) of this process and of its finished child processes
    (the workers and the second writer, once the run has joined them)."""
    own = resource.getrusage(resource.RUSAGE_SELF)
    children = resource.getrusage(resource.RUSAGE_CHILDREN)
    return own.ru_utime + own.ru_stime, children.ru_utime + children.ru_stime


def _cores():
    """The cores this process may run on (fewer than the machine's where it is limited)."""
    try:
        return len(os.sched_getaffinity(0))
    except AttributeError:  # not on Linux
        return os.cpu_count() or 1


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


def _discharge_table(flow, meta):
    import pandas as pd

    n_gauges, n_days = flow.shape
    return pd.DataFrame(
        {
            "gauge_id": np.repeat(np.asarray(meta["ids"], dtype=object), n_days),
            "date": np.tile(
                pd.date_range(meta["start"], periods=n_days, freq="D").to_numpy(), n_gauges
            ),
            "discharge": flow.reshape(-1),
        }
    )


def _child(*args):
    """Run this script with ``args`` in a fresh process; its last line, as JSON."""
    done = subprocess.run(
        [sys.executable, __file__, *map(str, args)], check=True, capture_output=True, text=True
    )
    return json.loads(done.stdout.strip().splitlines()[-1])


def measure_end_to_end(folder, parquet, workers):
    """In a fresh process: the command line's run, Parquet to GeoPackage (seconds, peak bytes
    above the baseline after imports)."""
    import pyarrow.parquet  # noqa: F401  (imports outside the measure)

    import recharge_atlas.algorithms.maps  # noqa: F401
    from recharge_atlas.algorithms import files
    from recharge_atlas.algorithms.pipeline import Settings
    from recharge_atlas.cli import run_files

    files.read_layer(Path(folder) / "gauges.gpkg", "gauges")  # loads the layer readers
    steps = _time_steps()
    baseline = _rss_bytes()
    _reset_peak()
    own_before, children_before = _cpu_seconds()
    start = time.perf_counter()
    run_files(
        Path(folder) / "gauges.gpkg",
        Path(folder) / "catchments.gpkg",
        parquet,
        Path(folder) / "result.gpkg",
        Settings(workers=workers),
        gauges_per_group=0,
    )
    seconds = time.perf_counter() - start
    own_after, children_after = _cpu_seconds()
    steps["the rest"] = seconds - sum(steps.values())
    peak = max(_peak_rss_bytes(), baseline) - baseline
    cpu = {"this process": own_after - own_before, "others": children_after - children_before}
    return {"seconds": seconds, "peak": peak, "steps": steps, "cpu": cpu}


#: The end-to-end run's steps that are timed: (module, function, step).
STEPS = (
    ("files", "read_table", "reading"),
    ("inputs", "tidy_discharge", "tidying"),
    ("groups", "compute_gauges", "computation"),
    ("files", "write_geopackage", "writing"),
)


def _time_steps():
    """Wrap the functions of :data:`STEPS` so each adds its time to the dict returned."""
    import functools
    import importlib

    steps = {step: 0.0 for _, _, step in STEPS}
    for module_name, name, step in STEPS:
        module = importlib.import_module(f"recharge_atlas.algorithms.{module_name}")
        function = getattr(module, name)

        @functools.wraps(function)
        def timed(*args, _function=function, _step=step, **kwargs):
            start = time.perf_counter()
            try:
                return _function(*args, **kwargs)
            finally:
                steps[_step] += time.perf_counter() - start

        setattr(module, name, timed)
    return steps


def measure_io_floor(folder, parquet):
    """In a fresh process: reading the Parquet table into arrays, and writing the run's layer
    and tables (read back from its GeoPackage beforehand) to a fresh GeoPackage with pyogrio's
    Arrow bulk insert; each best of two."""
    import geopandas as gpd
    import pyarrow.parquet as pq
    import pyogrio

    from recharge_atlas.algorithms.files import RESULT_TABLES, read_attribute_table

    result = Path(folder) / "result.gpkg"
    layers = [("catchments", gpd.read_file(result, layer="catchments"))]
    layers += (
        [("incremental_areas", gpd.read_file(result, layer="incremental_areas"))]
        if ("incremental_areas" in [n for n, _ in pyogrio.list_layers(result)])
        else []
    )
    tables = [(name, read_attribute_table(result, name)) for name, _, _ in RESULT_TABLES]
    read = write = float("inf")
    for attempt in range(2):
        start = time.perf_counter()
        # Gauge ids as dictionary codes: the cheapest arrays that hold the table.
        table = pq.read_table(parquet, read_dictionary=["gauge_id"])
        columns = {
            n: (
                table.column(n).combine_chunks().indices.to_numpy()
                if n == "gauge_id"
                else table.column(n).to_numpy()
            )
            for n in table.column_names
        }
        read = min(read, time.perf_counter() - start)
        del table, columns
        target = Path(folder) / f"floor{attempt}.gpkg"
        start = time.perf_counter()
        for name, frame in layers + tables:
            pyogrio.write_dataframe(frame, target, layer=name, driver="GPKG", use_arrow=True,
                                    append=target.exists())  # fmt: skip
        write = min(write, time.perf_counter() - start)
    return {"read": read, "write": write}


def qgis_ratio(folder_root, gauges=200, years=30, seed=1):
    """``qgis_process`` against ``recharge-atlas run`` on one network (seconds each, start-up
    included), or None when QGIS is not installed."""
    import shutil

    qgis = shutil.which("qgis_process.bin") or shutil.which("qgis_process")
    if qgis is None or not Path("/usr/bin/python3").exists():
        return None
    folder = Path(folder_root) / "qgis"
    folder.mkdir()
    subprocess.run([sys.executable, __file__, "--gauges", str(gauges), "--years", str(years),
                    "--seed", str(seed), "--generate-into", str(folder)], check=True)  # fmt: skip
    meta = json.loads((folder / "meta.json").read_text())
    csv = folder / "discharge.csv"
    _discharge_table(np.load(folder / "flow.npy"), meta).to_csv(csv, index=False)
    repo = Path(__file__).resolve().parents[1]
    plugin_path = folder / "plugins"
    plugin_path.mkdir()
    (plugin_path / "recharge_atlas").symlink_to(repo)
    env = dict(os.environ, QGIS_PLUGINPATH=str(plugin_path), QT_QPA_PLATFORM="offscreen",
               HOME=str(folder / "home"), XDG_DATA_HOME=str(folder / "home" / "data"),
               XDG_CONFIG_HOME=str(folder / "home" / "config"))  # fmt: skip
    subprocess.run([qgis, "plugins", "enable", "recharge_atlas"], env=env, capture_output=True)
    inputs = {"GAUGES": folder / "gauges.gpkg", "CATCHMENTS": folder / "catchments.gpkg",
              "DISCHARGE": csv}  # fmt: skip
    out = folder / "qgis.gpkg"
    names = ("OUTPUT", "INCREMENTAL_AREAS", "ANNUAL", "EVENTS", "PERIODS", "SEGMENTS",
             "MASTER_RECESSION", "LINKS")  # fmt: skip
    seconds_qgis = seconds_cli = float("inf")
    for attempt in range(2):  # best of two each, in turns (this machine's speed wanders)
        out.unlink(missing_ok=True)
        start = time.perf_counter()
        done = subprocess.run(
            [qgis, "run", "recharge_atlas:catchmentrecharge",
             *[f"--{k}={v}" for k, v in inputs.items()], *[f"--{n}={out}" for n in names]],
            env=env, capture_output=True, text=True,
        )  # fmt: skip
        seconds_qgis = min(seconds_qgis, time.perf_counter() - start)
        if done.returncode != 0:
            print("qgis_process failed: " + done.stderr.strip().splitlines()[-1], file=sys.stderr)
            return None
        cli_out = folder / f"cli{attempt}.gpkg"
        start = time.perf_counter()
        subprocess.run(
            [sys.executable, "-m", "recharge_atlas", "run", "--gauges", inputs["GAUGES"],
             "--catchments", inputs["CATCHMENTS"], "--discharge", csv, "--out", cli_out],
            check=True, capture_output=True, env=dict(os.environ, PYTHONPATH=str(plugin_path)),
        )  # fmt: skip
        seconds_cli = min(seconds_cli, time.perf_counter() - start)
    return {"qgis": seconds_qgis, "cli": seconds_cli}


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
    parser.add_argument("--skip-qgis", action="store_true", help="do not time qgis_process")
    parser.add_argument("--generate-into", help=argparse.SUPPRESS)
    parser.add_argument("--measure-end-to-end", nargs=3, help=argparse.SUPPRESS)
    parser.add_argument("--measure-io-floor", nargs=2, help=argparse.SUPPRESS)
    args = parser.parse_args(argv)
    if args.generate_into:
        generate(args.generate_into, args.gauges, args.years, args.seed)
        return 0
    if args.measure_end_to_end:
        folder, parquet, workers = args.measure_end_to_end
        print(json.dumps(measure_end_to_end(folder, parquet, int(workers))))
        return 0
    if args.measure_io_floor:
        print(json.dumps(measure_io_floor(*args.measure_io_floor)))
        return 0
    if not args.skip_end_to_end:
        try:
            import pyarrow  # noqa: F401
            import pyogrio  # noqa: F401
        except ImportError as exc:
            print(
                f"the end-to-end and I/O figures need {exc.name}: pip install pyarrow pyogrio "
                "(or run with --skip-end-to-end)",
                file=sys.stderr,
            )
            return 2

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

        e2e = floor = table_bytes = None
        if not args.skip_end_to_end:
            table = _discharge_table(flow, meta)
            # The table's numeric bytes: its values and dates (8 bytes each) and one 8-byte
            # code per row for the gauge id.
            table_bytes = 3 * 8 * len(table)
            parquet = Path(folder) / "discharge.parquet"
            table.to_parquet(parquet, index=False)
            del table
            # Best of two fresh processes each (this machine's speed wanders; the floor's own
            # read by as much as 0.35 to 0.85 s, with the memory the system hands back).
            runs = [_child("--measure-end-to-end", folder, parquet, args.workers) for _ in range(2)]
            faster = min(runs, key=lambda r: r["seconds"])
            e2e = {**faster, "peak": max(r["peak"] for r in runs)}
            floors = [_child("--measure-io-floor", folder, parquet) for _ in range(2)]
            floor = {k: min(f[k] for f in floors) for k in ("read", "write")}
        qgis = None if args.skip_qgis else qgis_ratio(folder)

    print(
        f"machine: {platform.machine()}, {os.cpu_count()} cores, python {platform.python_version()}, numpy {np.__version__}"
    )
    print(
        f"network: {args.gauges} gauges x {args.years} years = {gauge_years:,.0f} gauge-years, {flow.size:,} daily values, {data_bytes / 1e6:,.0f} MB (generated in {generation:.1f} s)"
    )
    if args.gaps_per_year > 0:
        print(f"gaps: {args.gaps_per_year:g} per gauge-year, 1 to 10 days each")
    print(f"timings: full and parallel best of {args.repeat} runs each")
    print(
        f"full_seconds={full:.3f} ({1000 * full / args.gauges:.2f} ms per gauge, {gauge_years / full:,.0f} gauge-years/s)"
    )
    print(f"workers={args.workers} parallel_seconds={parallel:.3f}")
    print(f"peak_rss_above_baseline_mb={(peak - baseline) / 1e6:,.0f}")
    if e2e is not None:
        io = floor["read"] + floor["write"]
        print(
            f"end_to_end_seconds={e2e['seconds']:.2f} (Parquet on disk to GeoPackage, table read "
            f"whole, {args.workers} workers): {gauge_years / e2e['seconds']:,.0f} gauge-years/s"
        )
        print(
            "end_to_end_steps: "
            + ", ".join(f"{step} {t:.2f} s" for step, t in e2e["steps"].items())
            + " (the faster run; the rest: linking, stacking, the layer, the checks)"
        )
        cpu, cores = e2e["cpu"], _cores()
        least = sum(cpu.values()) / cores
        print(
            f"end_to_end_cpu: this process {cpu['this process']:.2f} s, the worker and writer "
            f"processes {cpu['others']:.2f} s (the faster run); on {cores} cores that work "
            f"takes at least {least:.2f} s however well its steps overlap, "
            f"so io_ratio {least / io:.2f} or more"
        )
        print(
            f"io_floor_seconds={io:.2f} (read the Parquet into arrays {floor['read']:.2f} s, "
            f"write the same layer and tables with pyogrio and Arrow {floor['write']:.2f} s)"
        )
        print(
            f"end_to_end_peak_mb={e2e['peak'] / 1e6:,.0f} (the table's numeric bytes: "
            f"{table_bytes / 1e6:,.0f} MB)"
        )
    if qgis is not None:
        print(
            f"qgis_process_seconds={qgis['qgis']:.2f} command_line_seconds={qgis['cli']:.2f} "
            "(200 gauges x 30 years, CSV in, every table into one GeoPackage, start-up included)"
        )
    print(f"io_ratio={e2e['seconds'] / io:.2f}" if e2e is not None else "io_ratio=not measured")
    print(
        f"qgis_ratio={qgis['qgis'] / qgis['cli']:.2f}"
        if qgis is not None
        else "qgis_ratio=not measured (QGIS is missing, or --skip-qgis)"
    )
    print(f"memory_ratio={(peak - baseline) / data_bytes:.2f}")
    if e2e is not None:
        print(f"end_to_end_peak_ratio={e2e['peak'] / table_bytes:.2f}")
    print(f"workers_speedup={full / parallel:.2f}")
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
