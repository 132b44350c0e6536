"""The command line's options: the ``run`` and ``demo`` parsers, their option groups, and how a
run's inputs and settings are recorded under the option names a user types (provenance)."""

from __future__ import annotations

import argparse

from recharge_atlas.algorithms.units import DISCHARGE_UNITS, UNIT_ALIASES

#: Exit code of a usage error (argparse's own).
EXIT_BAD_INPUT = 2


#: Baseflow methods as the command line spells them, with the core's names.
BASEFLOW_METHODS = {
    "eckhardt": "eckhardt",
    "lyne-hollick": "lyne_hollick",
    "smoothed-minima": "smoothed_minima",
}


class _Parser(argparse.ArgumentParser):
    """argparse with usage errors in two lines (what is wrong, where to find the options)
    instead of the whole usage text; exit code 2 as argparse's own."""

    def error(self, message):
        from recharge_atlas.algorithms.errors import one_line

        self.exit(
            EXIT_BAD_INPUT,
            f"{self.prog}: error: {one_line(message)}\n"
            f"{self.prog}: run '{self.prog} --help' for the options\n",
        )


def _debug_option(parser, default):
    parser.add_argument(
        "--debug",
        action="store_true",
        default=default,
        help="on an internal error, print the full trace (and show library warnings)",
    )


def _parser():
    parser = _Parser(
        prog="recharge-atlas",
        description="Groundwater recharge from streamflow records, mapped across catchments.",
    )
    _debug_option(parser, False)
    from recharge_atlas.algorithms.provenance import tool_version

    parser.add_argument("--version", action="version", version=f"recharge-atlas {tool_version()}")
    sub = parser.add_subparsers(dest="command", metavar="COMMAND", parser_class=_Parser)
    sub.required = True

    run = sub.add_parser(
        "run",
        help="estimate recharge for gauges and catchments",
        description="Estimate recharge for every gauge by recession-curve displacement and write a GeoPackage.",
    )
    _debug_option(run, argparse.SUPPRESS)
    files = run.add_argument_group("inputs and outputs")
    files.add_argument(
        "--gauges",
        required=True,
        metavar="PATH",
        help="gauge points (any vector format; 'file.gpkg|layername=NAME' picks a layer)",
    )
    basins = files.add_mutually_exclusive_group(required=True)
    basins.add_argument(
        "--catchments",
        metavar="PATH",
        help="catchment polygons: the total drainage area of each gauge (nested ones overlap)",
    )
    basins.add_argument(
        "--subbasins",
        metavar="PATH",
        help="or non-overlapping subbasins with an id and a downstream-id field; gauges sit at their outlets",
    )
    files.add_argument(
        "--discharge",
        required=True,
        metavar="PATH",
        help="daily discharge table: CSV, Parquet or a vector table (one row per gauge and day)",
    )
    precipitation = files.add_mutually_exclusive_group()
    precipitation.add_argument(
        "--precipitation-field",
        metavar="FIELD",
        help="field of the catchments layer with mean annual precipitation in mm/yr: adds "
        "recharge_share_of_precipitation (a share above 1 is flagged)",
    )
    precipitation.add_argument(
        "--precipitation-raster",
        metavar="PATH",
        help="or a raster of mean annual precipitation in mm/yr, averaged over each catchment "
        "(needs rasterio: pip install 'recharge-atlas[raster]')",
    )
    files.add_argument(
        "--out",
        required=True,
        metavar="OUT.gpkg",
        help="GeoPackage to write (layer catchments; tables annual, events, periods, segments, master_recession)",
    )
    files.add_argument(
        "--map", metavar="OUT.png", help="also draw a choropleth map of mean annual recharge"
    )
    files.add_argument(
        "--report",
        metavar="OUT.html",
        help="also write a self-contained HTML report: maps, cautions, each gauge's hydrograph, recession and annual table",
    )
    files.add_argument(
        "--year-maps", metavar="OUT.png", help="also draw one map of recharge per water year"
    )
    files.add_argument(
        "--classes",
        default="quantiles",
        choices=["quantiles", "equal-interval", "natural-breaks"],
        help="how map classes are drawn (default quantiles)",
    )
    files.add_argument(
        "--class-count",
        type=int,
        default=5,
        metavar="N",
        help="number of map classes, 1 to 12 (default 5)",
    )
    files.add_argument(
        "--overwrite",
        action="store_true",
        help="with a PostgreSQL --out: replace tables of the same names in the schema",
    )
    files.add_argument(
        "--daily",
        action="store_true",
        help="also write table daily (flow and baseflow of every day; large)",
    )
    _add_field_options(run)
    _add_method_options(run)
    _add_basin_options(run)
    speed = run.add_argument_group("speed")
    speed.add_argument(
        "--workers",
        type=int,
        default=1,
        metavar="N",
        help="processes that share the gauges (default 1); results are identical",
    )
    speed.add_argument(
        "--gauges-per-group",
        type=int,
        metavar="N",
        help="read the discharge table N gauges at a time, for tables larger than memory "
        "(default: 500 when the file is over 256 MB; 0 reads it whole)",
    )
    speed.add_argument(
        "--dask-scheduler",
        metavar="ADDRESS",
        help="send the gauges to an existing Dask distributed cluster, e.g. tcp://10.0.0.5:8786 (needs dask and distributed)",
    )

    demo = sub.add_parser(
        "demo",
        help="run the whole job on the invented demo region",
        description="Run the whole job on the invented demo region in sample_layers/.",
    )
    demo.add_argument(
        "--out",
        default="demo_output",
        metavar="DIR",
        help="folder for the results (default: demo_output)",
    )
    _debug_option(demo, argparse.SUPPRESS)
    parser.commands = {"run": run, "demo": demo}  # for the provenance of a run
    return parser


#: The command line's inputs, recorded with their size and SHA-256 in every output.
INPUT_OPTIONS = (
    "--gauges",
    "--catchments",
    "--subbasins",
    "--discharge",
    "--precipitation-raster",
)


def _provenance(command_parser, args):
    """Where a run's outputs come from: its inputs and every setting (defaults included) in
    the option names a user types (:class:`provenance.Provenance`)."""
    from recharge_atlas.algorithms.provenance import Provenance

    inputs, settings = [], []
    for action in command_parser._actions:
        names = [o for o in action.option_strings if o.startswith("--")]
        if not names or action.dest in ("help", "debug"):
            continue
        name, value = max(names, key=len), getattr(args, action.dest, None)
        if name in INPUT_OPTIONS:
            if value is not None:
                inputs.append((name, value))
        else:
            settings.append((name, value))
    return Provenance("command line", inputs, settings)


def _add_field_options(run):
    group = run.add_argument_group("fields and units")
    units = sorted(DISCHARGE_UNITS) + sorted(UNIT_ALIASES)
    group.add_argument(
        "--units",
        default="m3/s",
        choices=units,
        help="units of the discharge values (default m3/s)",
    )
    group.add_argument(
        "--gauge-id-field",
        default="gauge_id",
        metavar="FIELD",
        help="gauge id field of the gauges layer (default gauge_id)",
    )
    group.add_argument(
        "--discharge-gauge-field",
        metavar="FIELD",
        help="gauge id field of the discharge table (default: the gauge id field)",
    )
    group.add_argument(
        "--date-field",
        default="date",
        metavar="FIELD",
        help="date field of the discharge table (default date)",
    )
    group.add_argument(
        "--value-field",
        default="discharge",
        metavar="FIELD",
        help="discharge field of the discharge table (default discharge)",
    )
    group.add_argument(
        "--catchment-gauge-field",
        metavar="FIELD",
        help="gauge id field of the catchments (default: the gauge id field)",
    )
    group.add_argument(
        "--flag-field",
        metavar="FIELD",
        help="quality-code field of the discharge table; flagged days are not used by the method",
    )
    group.add_argument(
        "--flag-values",
        metavar="CODES",
        help="comma-separated codes that flag a day (default: any code)",
    )
    group.add_argument(
        "--min-day-coverage",
        type=float,
        default=0.75,
        metavar="SHARE",
        help="sub-daily records: share of a day's values needed for its mean (default 0.75)",
    )


def _add_basin_options(run):
    group = run.add_argument_group("linking and basins")
    group.add_argument(
        "--link",
        default="auto",
        choices=["auto", "id", "spatial"],
        help="link gauges to catchments by the id field or spatially (default auto: by id when the catchments have the field)",
    )
    group.add_argument(
        "--link-tolerance",
        type=float,
        default=100.0,
        metavar="METRES",
        help="spatial linking: how far a gauge may lie from its catchment's boundary (default 100)",
    )
    group.add_argument(
        "--overlap-tolerance",
        type=float,
        default=0.05,
        metavar="SHARE",
        help="nesting: share of a basin that may lie outside a larger one containing it (default 0.05)",
    )
    group.add_argument(
        "--reported-area-field",
        metavar="FIELD",
        help="field of the gauges layer with a reported drainage area in km² (a mismatch over 10%% is flagged)",
    )
    group.add_argument(
        "--subbasin-id-field",
        default="subbasin_id",
        metavar="FIELD",
        help="subbasin maps: id field of the subbasins (default subbasin_id)",
    )
    group.add_argument(
        "--downstream-field",
        default="downstream_id",
        metavar="FIELD",
        help="subbasin maps: field naming the subbasin each drains into (default downstream_id)",
    )
    group.add_argument(
        "--ungauged",
        default="donor",
        choices=["donor", "empty"],
        help="subbasin maps: subbasins with no gauge downstream borrow the nearest gauged depth, or stay empty (default donor)",
    )


def _add_method_options(run):
    group = run.add_argument_group("method")
    group.add_argument(
        "--water-year-start",
        type=int,
        default=10,
        metavar="MONTH",
        help="first month of the water year, 1-12 (default 10, October)",
    )
    group.add_argument(
        "--recession-index",
        type=float,
        metavar="DAYS",
        help="use this recession index K (days per log cycle) for every gauge instead of estimating it",
    )
    group.add_argument(
        "--recession-index-field",
        metavar="FIELD",
        help="field of the gauges layer giving K per gauge (empty values: estimate)",
    )
    group.add_argument(
        "--runoff-end-lag",
        type=float,
        metavar="DAYS",
        help="days after a peak when surface runoff has ended (default: A^0.2 with A in mi²)",
    )
    group.add_argument(
        "--min-segment-days",
        type=int,
        default=7,
        metavar="DAYS",
        help="shortest recession segment used for K (default 7)",
    )
    group.add_argument(
        "--baseflow-method",
        default="eckhardt",
        choices=sorted(BASEFLOW_METHODS),
        help="baseflow separation (default eckhardt)",
    )
    group.add_argument(
        "--bfi-max",
        type=float,
        default=0.80,
        metavar="X",
        help="BFImax of the Eckhardt filter (default 0.80; 0.50 ephemeral, 0.25 hard rock)",
    )
    group.add_argument(
        "--period",
        default="month",
        choices=["month", "season"],
        help="sub-annual sums in table periods (default month)",
    )
