"""Our own code against well-kept libraries that do the same job (issue 17); prints figures,
asserts nothing.

Usage::

    python benchmarks/libraries.py [--gauges 500] [--years 30] [--repeat 2]
                                   [--only writer|breaks|sniff]

Three comparisons, each best of ``--repeat`` runs:

* **GeoPackage writer**: a run's layers and tables (a synthetic network of ``--gauges`` gauges
  and ``--years`` years, run through the command line's own path) written to a fresh GeoPackage
  by ``files.write_geopackage`` (GDAL for the layers, our own batched SQLite inserts for the
  tables) and by ``pyogrio.write_dataframe(..., use_arrow=True)`` (layers and tables). Then both
  files are opened with pyogrio and compared table by table: rows, columns, the type GDAL
  reads for each column, the values read back, and the GeoPackage version.
* **natural breaks**: ``maps.class_breaks(..., "natural_breaks")`` (our Fisher-Jenks) against
  ``mapclassify.FisherJenks`` on 50, 500 and 3,000 values, and whether the limits are equal.
* **text sniffing**: ``files._text_encoding`` and ``files._separator`` against the standard
  library's ``csv.Sniffer`` (separator) and, where installed, ``charset_normalizer`` (encoding),
  on tables of the kinds the tests use: comma, semicolon, tab, UTF-8 with a byte-order mark,
  UTF-16 and Latin-1, and two harder ones (one column; semicolons with quoted commas). The
  standard library guesses no encoding, so ``csv.Sniffer`` is given the one we found.

A missing library (pyogrio, pyarrow, mapclassify, charset-normalizer) is named with the package
to install and its comparison skipped. The text comparison runs in Debian's own Python too
(``/usr/bin/python3``, which has charset-normalizer but neither pyogrio nor mapclassify).
"""

from __future__ import annotations

import argparse
import csv
import sys
import tempfile
import time
from pathlib import Path

import numpy as np

HERE = Path(__file__).resolve().parent
PACKAGES = {
    "pyogrio": "pip install pyogrio",
    "pyarrow": "pip install pyarrow",
    "mapclassify": "pip install mapclassify",
    "charset_normalizer": "pip install charset-normalizer (Debian: apt install "
    "python3-charset-normalizer)",
}


def _missing(*modules):
    """The first of ``modules`` that cannot be imported, with how to install it; else None."""
    import importlib

    for module in modules:
        try:
            importlib.import_module(module)
        except ImportError:
            return f"{module} is not installed: {PACKAGES[module]}"
    return None


def _best(repeat, function, *arguments, **keywords):
    """Best wall time of ``repeat`` calls of ``function(*arguments, **keywords)`` (seconds), and
    its last result."""
    best, out = float("inf"), None
    for _ in range(repeat):
        start = time.perf_counter()
        out = function(*arguments, **keywords)
        best = min(best, time.perf_counter() - start)
    return best, out


# --------------------------------------------------------------------------- GeoPackage writer


def _run(folder, gauges, years, seed=1):
    """A run's AtlasResult on a synthetic network (the command line's own path)."""
    sys.path.insert(0, str(HERE))
    import run as bench  # benchmarks/run.py

    from recharge_atlas.algorithms.pipeline import Settings
    from recharge_atlas.cli import run_files

    bench.generate(folder, gauges, years, seed)
    import json

    meta = json.loads((Path(folder) / "meta.json").read_text())
    flow = np.load(Path(folder) / "flow.npy")
    parquet = Path(folder) / "discharge.parquet"
    bench._discharge_table(flow, meta).to_parquet(parquet, index=False)
    return run_files(
        Path(folder) / "gauges.gpkg",
        Path(folder) / "catchments.gpkg",
        parquet,
        Path(folder) / "result.gpkg",
        Settings(workers=1),
        gauges_per_group=0,
    )


def _write_pyogrio(result, target):
    """The run's layers and tables with pyogrio and Arrow (what could replace our writer)."""
    import pandas as pd
    import pyarrow as pa
    import pyogrio

    from recharge_atlas.algorithms.files import GPKG_VERSION, RESULT_TABLES, _gpkg_type

    target = Path(target)
    if target.exists():
        target.unlink()
    layers = [("catchments", result.catchments)]
    incremental = result.incremental_areas()
    if len(incremental):
        layers.append(("incremental_areas", incremental))
    tables = []
    for name, attribute, _ in RESULT_TABLES:
        frame = getattr(result, attribute)
        # Days as Arrow dates, so GDAL stores DATE as ours does (a pandas datetime64 column
        # would become DATETIME); the conversion is part of the time.
        days = [c for c in frame.columns if _gpkg_type(frame[c]) == "DATE"]
        if days:
            frame = frame.assign(**{c: frame[c].astype(pd.ArrowDtype(pa.date32())) for c in days})
        tables.append((name, frame))
    for name, frame in layers + tables:
        pyogrio.write_dataframe(
            frame, target, layer=name, driver="GPKG", use_arrow=True,
            append=target.exists(), dataset_options={"VERSION": GPKG_VERSION},
        )  # fmt: skip


def _write_ours(result, target):
    from recharge_atlas.algorithms.files import write_geopackage

    target = Path(target)
    if target.exists():
        target.unlink()
    write_geopackage(result, target)


def _describe(path):
    """Per layer/table of a GeoPackage: rows, and GDAL's type for each column."""
    import pyogrio

    out = {}
    for name, _geometry in pyogrio.list_layers(path):
        info = pyogrio.read_info(path, layer=name)
        out[name] = (int(info["features"]), dict(zip(info["fields"], map(str, info["dtypes"]))))
    return out


def _same_values(a, b, name):
    """Whether layer/table ``name`` reads back the same from GeoPackages ``a`` and ``b``."""
    import pandas as pd
    import pyogrio

    left, right = (pyogrio.read_dataframe(p, layer=name) for p in (a, b))
    try:
        pd.testing.assert_frame_equal(left, right, check_exact=True)
    except AssertionError:
        return False
    return True


def _gpkg_version(path):
    import sqlite3

    with sqlite3.connect(path) as db:
        user_version = db.execute("PRAGMA user_version").fetchone()[0]
    return f"{user_version // 10000}.{user_version // 100 % 100}"


def writer(args):
    missing = _missing("pyogrio", "pyarrow")
    if missing:
        print(f"writer: skipped, {missing}")
        return
    from recharge_atlas.algorithms.files import RESULT_TABLES

    with tempfile.TemporaryDirectory(prefix="recharge-atlas-libs-") as folder:
        result = _run(folder, args.gauges, args.years)
        rows = sum(len(getattr(result, attribute)) for _, attribute, _ in RESULT_TABLES)
        ours_path, theirs_path = Path(folder) / "ours.gpkg", Path(folder) / "pyogrio.gpkg"
        ours = pyogrio_s = float("inf")
        for _ in range(args.repeat):  # in turns: this machine's speed wanders
            ours = min(ours, _best(1, _write_ours, result, ours_path)[0])
            pyogrio_s = min(pyogrio_s, _best(1, _write_pyogrio, result, theirs_path)[0])
        print(
            f"writer: {args.gauges} gauges x {args.years} years, {len(result.catchments)} "
            f"catchments, {rows:,} table rows; best of {args.repeat}"
        )
        print(f"writer_ours_seconds={ours:.2f} (files.write_geopackage: layers, tables, style)")
        print(f"writer_pyogrio_arrow_seconds={pyogrio_s:.2f} (layers and tables, no style)")
        a, b = _describe(ours_path), _describe(theirs_path)
        print(f"gpkg_version ours={_gpkg_version(ours_path)} pyogrio={_gpkg_version(theirs_path)}")
        for name in sorted(set(a) | set(b)):
            if name not in a or name not in b:
                print(f"  {name}: only in {'ours' if name in a else 'pyogrio'}")
                continue
            (rows_a, types_a), (rows_b, types_b) = a[name], b[name]
            differ = [
                f"{c} {types_a.get(c, '-')}/{types_b.get(c, '-')}"
                for c in dict.fromkeys([*types_a, *types_b])
                if types_a.get(c) != types_b.get(c)
            ]
            same = "same rows" if rows_a == rows_b else f"rows {rows_a}/{rows_b}"
            if not differ and rows_a == rows_b:
                same += (
                    ", same values"
                    if _same_values(ours_path, theirs_path, name)
                    else ", DIFFERENT values"
                )
            print(
                f"  {name}: {same}, "
                + ("same columns and types" if not differ else "ours/pyogrio: " + "; ".join(differ))
            )


# --------------------------------------------------------------------------- natural breaks


def breaks(args):
    from recharge_atlas.algorithms.maps import class_breaks, within_class_squares

    missing = _missing("mapclassify")
    mapclassify = None
    if missing:
        print(f"natural breaks: mapclassify skipped, {missing}")
    else:
        import warnings

        import mapclassify

        try:
            import numba  # noqa: F401
        except ImportError:
            print("natural breaks: numba is missing, so mapclassify runs its pure-Python loop")
        warnings.filterwarnings("ignore", message="Numba not installed")
    rng = np.random.default_rng(7)
    for n in (50, 500, 3000):
        values = rng.gamma(2.0, 60.0, n)  # skewed, like mean annual recharge in mm
        repeat = args.repeat if n > 500 else 5 * args.repeat
        ours, limits = _best(repeat, class_breaks, values, "natural_breaks", 5)
        line = f"natural_breaks n={n}: ours {1000 * ours:.1f} ms"
        if mapclassify is not None:
            theirs, fj = _best(repeat, mapclassify.FisherJenks, values, k=5)
            equal = np.allclose(limits[1:], fj.bins, rtol=1e-12, atol=0)
            line += f", mapclassify.FisherJenks {1000 * theirs:.1f} ms, same limits: {equal}"
            if not equal:  # the one that minimises the within-class sum of squares is right
                theirs_limits = np.concatenate([[values.min()], fj.bins])
                ours_squares = within_class_squares(values, limits)
                their_squares = within_class_squares(values, theirs_limits)
                line += (
                    f" (within-class sum of squares: ours {ours_squares:,.2f}, "
                    f"mapclassify {their_squares:,.2f})"
                )
        print(line)


# --------------------------------------------------------------------------- text sniffing

_ROWS = [("gauge_id", "date", "discharge")] + [
    (f"{i:05d}", f"2001-01-{d:02d}", f"{0.5 + d / 10:.3f}") for i in range(3) for d in range(1, 29)
]


def _text_files(folder):
    """(name, path, encoding, separator) for each kind of table the tests write."""
    kinds = [
        ("comma", ",", "utf-8", ".csv"),
        ("semicolon", ";", "utf-8", ".csv"),
        ("tab", "\t", "utf-8", ".txt"),
        ("utf8_bom", ",", "utf-8-sig", ".csv"),
        ("utf16_bom", ",", "utf-16", ".csv"),
        ("utf16_le", ";", "utf-16-le", ".csv"),
        ("latin1", ";", "latin-1", ".csv"),
    ]
    out = []
    for name, sep, encoding, suffix in kinds:
        rows = [list(r) for r in _ROWS]
        if name == "latin1":  # a station field with accents, as Windows exports write it
            rows[0].append("station")
            for r in rows[1:]:
                r.append("Vaucrès-sur-Lonne")
        if sep == ";":  # decimal commas, as where ; is the separator
            rows = [[c.replace(".", ",") if c[:1].isdigit() and "-" not in c else c
                     for c in r] for r in rows]  # fmt: skip
        path = Path(folder) / f"{name}{suffix}"
        path.write_text("\n".join(sep.join(r) for r in rows) + "\n", encoding=encoding)
        out.append((name, path, encoding, sep))
    # Two harder ones: one column only (any separator reads it; we expect the default comma),
    # and semicolons with commas inside quoted names and decimal commas.
    path = Path(folder) / "one_column.csv"
    path.write_text("discharge\n" + "".join(f"{0.5 + d / 10:.3f}\n" for d in range(60)))
    out.append(("one_column", path, "utf-8", ","))
    path = Path(folder) / "quoted_commas.csv"
    path.write_text(
        "gauge_id;name;discharge\n"
        + "".join(
            f'{i:05d};"Lonne, upper reach {d}";{d},{i}5\n' for i in range(3) for d in range(20)
        )
    )
    out.append(("quoted_commas", path, "utf-8", ";"))
    return out


def _normal(encoding):
    return {"utf-8-sig": "utf-8", "utf_8": "utf-8", "ascii": "utf-8", "utf_16": "utf-16",
            "utf_16_le": "utf-16-le", "latin_1": "latin-1", "iso-8859-1": "latin-1",
            "cp1252": "latin-1"}.get(encoding.lower().replace("-", "_") if encoding else "",
                                     encoding)  # fmt: skip


def _encoding_ok(found, truth):
    """Whether reading with ``found`` gives the text written with ``truth``."""
    if found is None:
        return False
    return _normal(found) == _normal(truth) or (
        {_normal(found), _normal(truth)} <= {"utf-8", "utf-8-sig"}
    )


def _stdlib_sniff(path, encoding):
    with open(path, encoding=encoding, errors="replace", newline="") as handle:
        sample = handle.read(1 << 16)
    try:
        return csv.Sniffer().sniff(sample, delimiters=",;\t|").delimiter
    except csv.Error:
        return None


def sniff(args):
    from recharge_atlas.algorithms import files

    normaliser = None
    missing = _missing("charset_normalizer")
    if missing:
        print(f"sniffing: charset-normalizer skipped, {missing}")
    else:
        import charset_normalizer

        def normaliser(path):
            best = charset_normalizer.from_path(path).best()
            return best.encoding if best is not None else None

    repeat = 20 * args.repeat
    with tempfile.TemporaryDirectory(prefix="recharge-atlas-sniff-") as folder:
        totals = {"ours": 0.0, "sniffer": 0.0, "normaliser": 0.0}
        right = {"ours_encoding": 0, "ours_sep": 0, "sniffer": 0, "normaliser": 0}
        kinds = _text_files(folder)
        for name, path, encoding, sep in kinds:
            t, found = _best(repeat, files._text_encoding, path, "table")
            t2, our_sep = _best(repeat, files._separator, path, found)
            totals["ours"] += t + t2
            ok_enc = _encoding_ok(found, encoding)
            right["ours_encoding"] += ok_enc
            right["ours_sep"] += our_sep == sep
            # The standard library guesses no encoding: give it ours (it only reads text).
            t3, their_sep = _best(repeat, _stdlib_sniff, path, found)
            totals["sniffer"] += t3
            right["sniffer"] += their_sep == sep
            shown = repr(their_sep) if their_sep else "raised csv.Error"
            line = (
                f"  {name}: ours {found} {our_sep!r} ({ok_enc and our_sep == sep}); "
                f"csv.Sniffer {shown} ({their_sep == sep})"
            )
            if normaliser is not None:
                t4, guessed = _best(max(1, repeat // 4), normaliser, path)
                totals["normaliser"] += t4
                right["normaliser"] += _encoding_ok(guessed, encoding)
                line += f"; charset-normalizer {guessed} ({_encoding_ok(guessed, encoding)})"
            print(line)
        n = len(kinds)
        print(
            f"sniffing {n} files: ours (encoding and separator) {1000 * totals['ours']:.2f} ms, "
            f"right {right['ours_encoding']}/{n} encodings, {right['ours_sep']}/{n} separators; "
            f"csv.Sniffer (separator only) {1000 * totals['sniffer']:.2f} ms, right "
            f"{right['sniffer']}/{n}"
            + (
                f"; charset-normalizer (encoding only) {1000 * totals['normaliser']:.1f} ms, "
                f"right {right['normaliser']}/{n}"
                if normaliser is not None
                else ""
            )
        )


def main(argv=None):
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--gauges", type=int, default=500)
    parser.add_argument("--years", type=int, default=30)
    parser.add_argument("--repeat", type=int, default=2)
    parser.add_argument("--only", choices=("writer", "breaks", "sniff"))
    args = parser.parse_args(argv)
    import platform

    print(f"python {platform.python_version()} ({sys.executable}), numpy {np.__version__}")
    for name, function in (("writer", writer), ("breaks", breaks), ("sniff", sniff)):
        if args.only in (None, name):
            function(args)
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
