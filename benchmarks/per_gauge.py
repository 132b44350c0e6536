"""What a gauge costs: the part that grows with its record and the part that does not.

Usage::

    python benchmarks/per_gauge.py [--years 2 5 15 30 90] [--gauge-years 6000] [--seed 3]

For each record length it generates a network of about ``--gauge-years`` gauge-years (so each
length does the same amount of daily work), times the pipeline's per-gauge work in this one
process (serial, best of three), and fits

    milliseconds per gauge = fixed + per_year × years

by least squares. ``fixed`` is what every gauge pays whatever its length: the Python and numpy
calls of each step (a few thousand a gauge, counted here with cProfile), the small tables, the
notes. ``per_year`` is the daily passes, the events and the water years. Prints figures,
asserts nothing.

Why it matters (issue 17): the end-to-end target ``io_ratio`` ≤ 2 leaves the computation of
2,000 gauges × 30 years about as long as the I/O floor itself. Work batched across gauges
could remove most of ``fixed`` but none of ``per_year × years``; that lower bound is printed.
"""

from __future__ import annotations

import argparse
import cProfile
import pstats
import sys
import time
from pathlib import Path

import numpy as np

sys.path.insert(0, str(Path(__file__).resolve().parent))
import run  # noqa: E402  (the benchmark's own helpers)


def _network(gauges, years, seed):
    from recharge_atlas.algorithms.basins import geodesic_area_km2
    from recharge_atlas.sample_layers.generate import make_network

    network = make_network(gauges, years, seed=seed)
    meta = {
        "start": str(network.dates[0].date()),
        "days": int(network.dates.size),
        "ids": list(network.gauges["gauge_id"]),
    }
    records = run._records(network.flow, meta)
    areas = dict(
        zip(network.catchments["gauge_id"], geodesic_area_km2(network.catchments.geometry))
    )
    return records, areas


def _ms_per_gauge(records, areas, repeat=3):
    run.full_computation(dict(list(records.items())[:5]), areas)  # warm: imports, caches
    best = float("inf")
    for _ in range(repeat):
        start = time.perf_counter()
        run.full_computation(records, areas)
        best = min(best, time.perf_counter() - start)
    return 1000.0 * best / len(records)


def _calls_per_gauge(records, areas):
    profile = cProfile.Profile()
    profile.enable()
    run.full_computation(records, areas)
    profile.disable()
    return pstats.Stats(profile).total_calls / len(records)


def main(argv=None):
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--years", type=int, nargs="+", default=[2, 5, 15, 30, 90])
    parser.add_argument("--gauge-years", type=int, default=6000)
    parser.add_argument("--seed", type=int, default=3)
    parser.add_argument("--workers", type=int, default=2, help="for the lower bound printed")
    args = parser.parse_args(argv)
    if len(set(args.years)) < 2:
        parser.error("give at least two different record lengths (--years)")

    rows = []
    print(f"{'years':>5} {'gauges':>6} {'ms/gauge':>9} {'calls/gauge':>11}")
    for years in sorted(set(args.years)):
        gauges = max(10, args.gauge_years // years)
        records, areas = _network(gauges, years, args.seed)
        ms = _ms_per_gauge(records, areas)
        calls = _calls_per_gauge(dict(list(records.items())[:50]), areas)
        rows.append((years, ms))
        print(f"{years:>5} {gauges:>6} {ms:>9.2f} {calls:>11.0f}", flush=True)

    years, ms = np.array(rows).T
    per_year, fixed = np.polyfit(years, ms, 1)
    print(f"\nfit: {fixed:.2f} ms fixed + {per_year:.3f} ms per year of record, per gauge")
    at30 = fixed + 30 * per_year
    print(
        f"at 30 years: {at30:.2f} ms a gauge, of which {fixed:.2f} ms ({100 * fixed / at30:.0f} %)"
        " does not grow with the record"
    )
    floor = 2000 * 30 * per_year / 1000 / max(args.workers, 1)
    print(
        f"2,000 gauges x 30 years on {args.workers} workers: {2000 * at30 / 1000 / args.workers:.1f}"
        f" s of computation now; at least {floor:.1f} s even if the fixed part were gone"
    )
    print(f"fixed_ms={fixed:.3f}")
    print(f"per_year_ms={per_year:.4f}")


if __name__ == "__main__":
    main()
