"""Accuracy on synthetic hard records: is every number within its band, or flagged?

Usage: python benchmarks/hard_records.py [--families F ...] [--seeds 1 2 3] [--years 28]
                                         [--gauges 4]

Builds the families of :mod:`recharge_atlas.sample_layers.families` (each breaks one of the
method's assumptions; truth from the generator's own recharge pulses), runs the per-gauge
hydrology with default settings on every gauge, and prints one line per gauge: recharge against
truth, K against truth, whether the truth lies in the band [low, high] and the band holds the
estimate, and the quality text. Then one summary line per family and one over all: gauges,
``off_and_ok`` (recharge or K off by more than 15 % while quality says ok), the worst errors
and the band's coverage of the truth (meant to be 90 %). It prints figures; it asserts nothing.
"""

from __future__ import annotations

import argparse

import numpy as np
import pandas as pd


def _pct(value):
    return "nan" if not np.isfinite(value) else f"{100 * value:+.1f}%"


def _summary(label, table):
    from recharge_atlas.sample_layers.families import score_family

    s = score_family(table)
    return (
        f"{label:<14} gauges={s['gauges']} ok={s['ok']} off_and_ok={s['off_and_ok']} "
        f"worst_recharge={100 * s['worst_recharge_error']:.1f}% "
        f"worst_k={100 * s['worst_k_error']:.1f}% "
        f"worst_ok_recharge={100 * s['worst_ok_recharge_error']:.1f}% "
        f"worst_ok_k={100 * s['worst_ok_k_error']:.1f}% "
        f"coverage={100 * s['coverage']:.0f}% coverage_ok={100 * s['coverage_ok']:.0f}% "
        f"band_holds_estimate={100 * s['band_holds_estimate']:.0f}%"
    )


def main(argv=None):
    from recharge_atlas.sample_layers.families import FAMILIES, make_family, run_gauge, score_gauge

    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--families", nargs="+", default=list(FAMILIES), choices=list(FAMILIES))
    parser.add_argument("--seeds", type=int, nargs="+", default=[1, 2, 3])
    parser.add_argument("--years", type=int, default=28)
    parser.add_argument("--gauges", type=int, default=4, help="gauges per family and seed")
    args = parser.parse_args(argv)
    rows = []
    for name in args.families:
        for seed in args.seeds:
            for gauge in make_family(name, seed, years=args.years, n_gauges=args.gauges):
                r = score_gauge(gauge, run_gauge(gauge))
                rows.append(r)
                print(
                    f"{name} seed={seed} gauge={r['gauge_id']} area={r['area_km2']:.0f}km2 "
                    f"years={r['complete_years']}/{r['true_complete_years']} "
                    f"recharge={r['recharge_mm']:.1f} true={r['true_recharge_mm']:.1f} "
                    f"error={_pct(r['recharge_error'])} "
                    f"K={r['k_days']:.1f} true={r['true_k_days']:.1f} error={_pct(r['k_error'])} "
                    f"band=[{r['low_mm']:.1f}, {r['high_mm']:.1f}] "
                    f"truth_in_band={'yes' if r['truth_in_band'] else 'no'} "
                    f"estimate_in_band={'yes' if r['estimate_in_band'] else 'no'} "
                    f"quality={r['quality']}"
                )
    table = pd.DataFrame(rows)
    print(
        f"seeds={' '.join(map(str, args.seeds))} years={args.years} gauges_per_seed={args.gauges}"
    )
    for name in args.families:
        print(_summary(name, table[table["family"] == name]))
    print(_summary("all", table))
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
