"""Time the whole pipeline on the demo region and on a larger synthetic one; print figures.

Usage: python benchmarks/demo_timing.py [--repeat 3]

Figures only: machines are noisy, so no test asserts on time.
"""

from __future__ import annotations

import argparse
import platform
import time

import numpy as np


def main(argv=None):
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--repeat", type=int, default=3)
    args = parser.parse_args(argv)

    from recharge_atlas.algorithms.pipeline import run_atlas
    from recharge_atlas.sample_layers.generate import make_region

    region = make_region()
    gauge_years = sum(
        len(g) / 365.25
        for _, g in region.discharge.dropna(subset=["discharge"]).groupby("gauge_id")
    )
    times = []
    for _ in range(args.repeat):
        start = time.perf_counter()
        run_atlas(region.gauges, region.catchments, region.discharge)
        times.append(time.perf_counter() - start)
    best = min(times)
    print(f"machine={platform.machine()} python={platform.python_version()} numpy={np.__version__}")
    print(f"demo_gauges={len(region.gauges)} gauge_years={gauge_years:.0f}")
    print(f"pipeline_seconds_best={best:.3f} median={np.median(times):.3f}")
    print(f"gauge_years_per_second={gauge_years / best:.0f}")
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
