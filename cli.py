"""Command-line interface: ``recharge-atlas run`` and ``recharge-atlas demo``.

A thin shell over :func:`recharge_atlas.algorithms.pipeline.run_atlas`, the same pipeline the
QGIS plugin uses. Exit codes: 0 on success (even when some gauges are flagged), 2 on bad input
or usage, with a short message on stderr and no traceback; 1 on an internal error, with a
one-line message (``--debug`` prints the full trace); 130 when interrupted, 143 when stopped
by SIGTERM (129 by SIGHUP), cleaned up the same way. Whatever the exit
code, either every output is written completely or none is touched.
"""

from __future__ import annotations

import dataclasses
import sys
import time
import warnings
from pathlib import Path

from recharge_atlas.cli_options import (  # noqa: F401 (the parser is importable from here too)
    BASEFLOW_METHODS,
    EXIT_BAD_INPUT,
    INPUT_OPTIONS,
    _parser,
    _provenance,
)

EXIT_OK = 0
EXIT_INTERNAL = 1


class _StderrReporter:
    """Prints per-gauge cautions and the summary to stderr, and a progress line on a terminal.

    The progress line (gauges done, rate, time left) is drawn only when stderr is a terminal
    and the run lasts more than a moment; redirected output gets no progress noise.
    """

    def __init__(self, stream=None):
        self.stream = stream or sys.stderr
        self.interactive = hasattr(self.stream, "isatty") and self.stream.isatty()
        self.started = None
        self.shown = 0.0
        self.line = False

    def progress(self, done, total, gauge_id=None):
        if not self.interactive or total <= 0:
            return
        now = time.monotonic()
        if self.started is None:
            self.started = now
        elapsed = now - self.started
        finished = done >= total
        if (now - self.shown < 0.5 or elapsed < 1.0) and not (finished and self.line):
            return
        self.shown = now
        rate = done / elapsed if elapsed > 0 else 0.0
        left = (total - done) / rate if rate > 0 else float("nan")
        text = f"gauges {done:,}/{total:,} ({100 * done / total:.0f}%), {rate:,.1f} gauges/s"
        if not finished and left == left:
            text += f", about {_duration(left)} left"
        self.stream.write("\r" + text.ljust(70))
        self.line = True
        if finished:
            self.stream.write("\n")
            self.line = False
        self.stream.flush()

    def cancelled(self):
        return False

    def _end_line(self):
        if self.line:
            self.stream.write("\n")
            self.line = False

    def info(self, text):
        self._end_line()
        print(text, file=self.stream)

    def warning(self, text):
        self._end_line()
        print(f"caution: {text}", file=self.stream)


def _duration(seconds):
    seconds = int(round(seconds))
    if seconds < 90:
        return f"{seconds} s"
    if seconds < 5400:
        return f"{seconds // 60} min"
    return f"{seconds / 3600:.1f} h"


def run_files(
    gauges,
    catchments,
    discharge,
    out,
    settings,
    map_path=None,
    reporter=None,
    daily=False,
    subbasins=None,
    report_path=None,
    year_maps_path=None,
    scheme="quantiles",
    classes=5,
    gauges_per_group=None,
    provenance=None,
    overwrite=False,
    precipitation_raster=None,
):
    """Read the inputs, run the pipeline and write the outputs. Returns the AtlasResult.

    Give either ``catchments`` (total drainage areas) or ``subbasins`` (a subbasin map).
    ``precipitation_raster`` (mm/yr) is averaged over each catchment into the field
    :data:`precipitation.RASTER_FIELD`, which the run then uses as ``precipitation_field``.
    ``out`` may be a PostgreSQL target (``postgresql://…|schema=NAME``; ``overwrite`` replaces
    tables there). ``provenance`` (:class:`provenance.Provenance`) is recorded in every output; without it
    the inputs are recorded under plain names and the settings as the pipeline holds them.
    """
    from recharge_atlas.algorithms import database, files
    from recharge_atlas.algorithms.errors import InputError
    from recharge_atlas.algorithms.pipeline import (
        require_records,
        run_atlas,
        run_atlas_subbasins,
    )

    to_database = database.is_database(out)
    out = str(out).strip() if to_database else Path(out)
    basins = subbasins if subbasins is not None else catchments
    what = "subbasins" if subbasins is not None else "catchments"

    def where(source):  # a file, or a database shown without its password
        return (
            database.describe(source)
            if database.is_database(source)
            else (files.split_layer(source)[0])
        )

    sources = {"gauges": where(gauges), what: where(basins), "discharge table": where(discharge)}
    if precipitation_raster is not None:
        sources["precipitation raster"] = str(precipitation_raster)
    outputs = [(map_path, "map"), (year_maps_path, "per-year map")]
    outputs = ([] if to_database else [(out, "output")]) + outputs
    outputs = [(Path(p), w) for p, w in outputs + [(report_path, "report")] if p]
    for n, (target, kind) in enumerate(outputs):
        if any(files.same_file(target, p) for p in sources.values()):
            raise InputError(f"the {kind} path is one of the input files", file=str(target))
        if any(files.same_file(target, other) for other, _ in outputs[:n]):
            raise InputError(f"the {kind} path is also another output's", file=str(target))
    if not to_database and out.suffix.lower() != ".gpkg":
        raise InputError("the output must be a GeoPackage ending in .gpkg", file=str(out))
    for path, suffixes, kind in (
        (map_path, (".png",), "map"),
        (year_maps_path, (".png",), "per-year map"),
        (report_path, (".html", ".htm"), "report"),
    ):
        if path and Path(path).suffix.lower() not in suffixes:
            raise InputError(
                f"the {kind} must be a file ending in {' or '.join(suffixes)}", file=str(path)
            )
    for target, kind in outputs:  # a bad output path fails now, not after the work
        files.check_output(target, kind)
    _remove_leftovers(files, [target for target, _ in outputs], reporter)
    from recharge_atlas.algorithms.maps import class_breaks

    class_breaks([1.0, 2.0], scheme, classes)  # a bad scheme or class count fails before the run
    if subbasins is not None and (settings.precipitation_field or precipitation_raster):
        raise InputError(
            "the share of precipitation is computed for catchments (--catchments), "
            "not for subbasin maps"
        )
    if precipitation_raster is not None:
        from recharge_atlas.algorithms.precipitation import RASTER_FIELD

        settings = dataclasses.replace(settings, precipitation_field=RASTER_FIELD)
    settings = settings.resolved()  # bad settings fail before any file is read
    if provenance is None:
        from recharge_atlas.algorithms.provenance import Provenance

        named = [("gauges", gauges), (what, basins), ("discharge", discharge)]
        provenance = Provenance("Python (run_files)", named, sorted(vars(settings).items()))
    spill = None
    try:
        gauge_layer = files.read_layer(gauges, "gauges")
        basin_layer = files.read_layer(basins, what)
        if precipitation_raster is not None:
            from recharge_atlas.algorithms.precipitation import RASTER_FIELD, zonal_means

            basin_layer = basin_layer.copy()  # in memory: the input file is not touched
            basin_layer[RASTER_FIELD] = zonal_means(basin_layer, precipitation_raster)
        _require_fields(gauge_layer, basin_layer, what, settings, sources, subbasins is not None)
        table = _discharge(files, discharge, gauge_layer, settings, gauges_per_group)
        if hasattr(table, "columns"):  # read whole (groups check their gauge field)
            _require_discharge_fields(table, settings, sources["discharge table"])
        # Daily series are kept only when an output needs them: a large run then holds its tables.
        keep_series = bool(daily or report_path)
        # A table read in gauge groups: each group's event, period and segment rows wait on
        # disk, not in memory (the report needs every gauge's tables, so it keeps them).
        spill = None if hasattr(table, "columns") or keep_series else files.TableSpill()
        sink = spill.add if spill is not None else None
        if subbasins is not None:
            result = run_atlas_subbasins(
                gauge_layer, basin_layer, table, settings, reporter, keep_series, sink
            )
        else:
            result = run_atlas(
                gauge_layer, basin_layer, table, settings, reporter, keep_series, sink
            )
        require_records(result)
    except BaseException as exc:
        if spill is not None:
            spill.close()
        if isinstance(exc, InputError):
            raise _located(exc, sources, settings) from None
        raise
    from recharge_atlas.algorithms.maps import recharge_map, year_maps

    # Every output is written to a temporary file beside it and all move into place together
    # at the end: a failure or an interrupt leaves none half-written and touches none.
    try:
        with files.staged_outputs() as stage:
            if not to_database:
                files.write_geopackage(
                    result,
                    stage.path(out),
                    daily=daily,
                    spill=spill,
                    scheme=scheme,
                    classes=classes,
                    provenance=provenance,
                )
            footer = provenance.footer()
            if map_path:
                mapped = result.subbasins if result.subbasins is not None else result.catchments
                figure = recharge_map(mapped, gauge_layer, scheme=scheme, classes=classes)
                files.save_figure(figure, stage.path(map_path, "map"), footer=footer)
            if year_maps_path:
                figure = year_maps(
                    result.catchments, result.annual, gauge_layer, scheme=scheme, classes=classes
                )
                files.save_figure(
                    figure, stage.path(year_maps_path, "per-year map"), dpi=100, footer=footer
                )
            if report_path:
                from recharge_atlas.algorithms.report import write_report

                write_report(
                    result,
                    stage.path(report_path, "report"),
                    gauges=gauge_layer,
                    settings=result.settings,
                    scheme=scheme,
                    classes=classes,
                    reporter=reporter,
                    provenance=provenance,
                )
            if to_database:  # last: one transaction, once every file is ready to move in
                database.write_results(
                    result,
                    out,
                    provenance=provenance,
                    overwrite=overwrite,
                    daily=daily,
                    spill=spill,
                )
    finally:
        if spill is not None:
            spill.close()
    return result


def _remove_leftovers(files, targets, reporter):
    """Remove what runs killed outright (SIGKILL, out of memory) left beside these outputs and
    in the temporary folder: only files provably made by a process of ours that is gone."""
    folders = [Path(t).parent if str(Path(t).parent) else Path(".") for t in targets]
    count, size = files.remove_dead_leftovers(folders)
    if count and reporter is not None:
        reporter.info(
            f"removed {count} temporary file{'s' if count != 1 else ''} "
            f"({size / 1e6:,.1f} MB) left by an earlier run that was killed"
        )


def _require_fields(gauge_layer, basin_layer, what, settings, sources, subbasins):
    """The fields the settings name, checked on each layer with its file in the message."""
    from recharge_atlas.algorithms.discharge import require_columns

    wanted = [settings.gauge_id_field, settings.recession_index_field]
    wanted += [settings.reported_area_field]
    require_columns(
        gauge_layer, [f for f in wanted if f], "gauges layer", file=str(sources["gauges"])
    )
    if subbasins:
        fields = [settings.subbasin_id_field, settings.downstream_field]
    elif settings.link_method(list(basin_layer.columns)) == "id":
        fields = [settings.catchment_gauge_field]
    else:
        fields = []
    require_columns(basin_layer, fields, f"{what} layer", file=str(sources[what]))


def _require_discharge_fields(table, settings, path):
    from recharge_atlas.algorithms.discharge import require_columns

    fields = [settings.discharge_gauge_field, settings.date_field, settings.value_field]
    fields += [settings.flag_field] if settings.flag_field else []
    require_columns(table, fields, "discharge table", file=str(path))


def _located(exc, sources, settings):
    """``exc`` with the file it is about, when the core named the layer or the field but could
    not know the file (it works on tables); for a missing field, with the option naming it."""
    from recharge_atlas.algorithms.pipeline import field_setting

    attribute = field_setting(exc.missing_field, settings)
    if attribute is not None and "; name the right field with --" not in exc.message:
        exc.extended(f"; name the right field with --{attribute.replace('_', '-')}")
    if exc.file is not None:
        return exc
    for what, path in sources.items():
        if exc.message.startswith((f"the {what} ", f"no gauge id of the {what} ")):
            return exc.located(file=str(path))
    about_discharge = (
        "no value of the",
        "the date",
        "the discharge field",
        "no gauge has a usable",
    )
    if exc.message.startswith(about_discharge):
        return exc.located(file=str(sources["discharge table"]))
    return exc


def _discharge(files, path, gauge_layer, settings, gauges_per_group):
    """The discharge table whole, or (large files, and always from a database, where the
    server picks each group's rows) an iterator over gauge groups of it."""
    from recharge_atlas.algorithms import database
    from recharge_atlas.algorithms.discharge import gauge_id_text, require_columns
    from recharge_atlas.algorithms.errors import InputError

    if gauges_per_group is not None and gauges_per_group < 0:
        raise InputError(f"gauges per group was {gauges_per_group}; expected 0 or more")
    in_database = database.is_database(path)
    if in_database:
        gauges_per_group = gauges_per_group or files.GAUGES_PER_GROUP
    elif gauges_per_group is None:
        file_path = files.split_layer(path)[0]
        large = file_path.exists() and file_path.stat().st_size > files.STREAM_BYTES
        gauges_per_group = files.GAUGES_PER_GROUP if large else 0
    if gauges_per_group == 0:
        return files.read_table(
            path,
            "discharge table",
            id_fields=[settings.discharge_gauge_field or settings.gauge_id_field],
        )
    require_columns(gauge_layer, [settings.gauge_id_field], "gauges layer")
    ids = [
        g
        for g in dict.fromkeys(gauge_id_text(gauge_layer[settings.gauge_id_field].to_numpy()))
        if g is not None
    ]
    if in_database:  # only the fields the run needs
        needed = [settings.date_field, settings.value_field, settings.flag_field]
        return database.discharge_groups(
            path, settings.discharge_gauge_field, ids, gauges_per_group, [c for c in needed if c]
        )
    return files.discharge_groups(
        path,
        settings.discharge_gauge_field,
        ids,
        gauges_per_group,
        date_field=settings.date_field,
    )


def _settings(args):
    from recharge_atlas.algorithms.pipeline import Settings

    return Settings(
        units=args.units,
        water_year_start=args.water_year_start,
        gauge_id_field=args.gauge_id_field,
        discharge_gauge_field=args.discharge_gauge_field,
        date_field=args.date_field,
        value_field=args.value_field,
        catchment_gauge_field=args.catchment_gauge_field,
        flag_field=args.flag_field,
        flag_values=args.flag_values,
        min_day_coverage=args.min_day_coverage,
        runoff_end_lag_days=args.runoff_end_lag,
        min_segment_days=args.min_segment_days,
        recession_index_days=args.recession_index,
        recession_index_field=args.recession_index_field,
        baseflow_method=BASEFLOW_METHODS[args.baseflow_method],
        bfi_max=args.bfi_max,
        period=args.period,
        link=args.link,
        link_tolerance_m=args.link_tolerance,
        overlap_tolerance=args.overlap_tolerance,
        reported_area_field=args.reported_area_field,
        precipitation_field=args.precipitation_field,
        ungauged=args.ungauged,
        subbasin_id_field=args.subbasin_id_field,
        downstream_field=args.downstream_field,
        workers=args.workers,
        dask_scheduler=args.dask_scheduler,
    )


def _demo(args, parser=None):
    from recharge_atlas.algorithms.pipeline import Settings
    from recharge_atlas.sample_layers import generate

    folder = Path(generate.HERE)
    out_dir = _demo_folder(Path(args.out))
    gpkg = out_dir / "recharge.gpkg"
    png = out_dir / "recharge_map.png"
    years_png = out_dir / "recharge_by_year.png"
    html = out_dir / "report.html"
    print(f"Demo region: {generate.REGION_NAME} (invented), from {folder}")
    # Recorded as the run command that does the same, every default shown.
    run_parser = (parser or _parser()).commands["run"]
    same = [
        "--gauges", str(folder / "gauges.gpkg"),
        "--catchments", str(folder / "catchments.gpkg"),
        "--discharge", str(folder / "discharge.csv"),
        "--out", str(gpkg), "--map", str(png), "--year-maps", str(years_png),
        "--report", str(html),
    ]  # fmt: skip
    provenance = _provenance(run_parser, run_parser.parse_args(same))
    provenance.interface = "command line (demo)"
    result = run_files(
        folder / "gauges.gpkg",
        folder / "catchments.gpkg",
        folder / "discharge.csv",
        gpkg,
        Settings(),
        map_path=png,
        reporter=_StderrReporter(),
        report_path=html,
        year_maps_path=years_png,
        provenance=provenance,
    )
    print(
        f"Results: {gpkg} (layers catchments, incremental_areas; tables annual, events, periods, segments, master_recession, links, run; opens styled in QGIS)"
    )
    print(f"Map:     {png} (and one map per water year: {years_png})")
    print(f"Report:  {html}")
    print(
        "Open the GeoPackage in QGIS, or compare with the known truth in sample_layers/truth_*.csv."
    )
    return result


def _demo_folder(out_dir):
    """The demo's output folder, made when missing; a clear error when it cannot be."""
    from recharge_atlas.algorithms.errors import InputError

    if out_dir.exists() and not out_dir.is_dir():
        raise InputError("the demo output path is a file, not a folder", file=str(out_dir))
    try:
        out_dir.mkdir(parents=True, exist_ok=True)
    except OSError as exc:
        raise InputError(
            f"the demo output folder could not be made: {exc.strerror or exc}", file=str(out_dir)
        ) from None
    return out_dir


class Stopped(KeyboardInterrupt):
    """The process was asked to stop by a signal (SIGTERM, SIGHUP): it unwinds exactly as
    Ctrl-C does, so every temporary file and worker is cleaned up on the way out."""

    def __init__(self, signum):
        super().__init__(signum)
        self.signum = signum


#: Signals that stop a run like Ctrl-C (the default action would end the process on the
#: spot and leave its temporary files behind).
STOP_SIGNALS = ("SIGTERM", "SIGHUP")


class _StopOnSignals:
    """While active, SIGTERM and SIGHUP raise :class:`Stopped` in the main thread (once: a
    second signal during the clean-up is ignored, so the clean-up completes)."""

    def __init__(self):
        self.previous = {}
        self.raised = False

    def _handler(self, signum, frame):
        if self.raised:
            return
        self.raised = True
        raise Stopped(signum)

    def __enter__(self):
        import signal
        import threading

        if threading.current_thread() is threading.main_thread():
            for name in STOP_SIGNALS:
                number = getattr(signal, name, None)
                if number is not None:
                    self.previous[number] = signal.signal(number, self._handler)
        return self

    def __exit__(self, *exc):
        import signal

        for number, handler in self.previous.items():
            signal.signal(number, handler)
        return False


def main(argv=None):
    """Entry point of the ``recharge-atlas`` command; returns the exit code."""
    parser = _parser()
    args = parser.parse_args(argv)
    debug = bool(getattr(args, "debug", False))
    from recharge_atlas.algorithms.errors import InputError, describe

    try:
        with warnings.catch_warnings(), _StopOnSignals():
            if not debug:  # library warnings are noise to users; our cautions are printed
                warnings.simplefilter("ignore")
            return _command(args, parser)
    except InputError as exc:
        print(f"recharge-atlas: error: {exc}", file=sys.stderr)
        if debug:
            _print_trace()
        return EXIT_BAD_INPUT
    except Stopped as exc:
        import signal

        name = signal.Signals(exc.signum).name
        print(f"recharge-atlas: stopped ({name}); no output written", file=sys.stderr)
        return 128 + int(exc.signum)
    except KeyboardInterrupt:
        print("recharge-atlas: interrupted; no output written", file=sys.stderr)
        return 130
    except Exception as exc:  # the last line of defence: a short message, never a traceback
        print(f"recharge-atlas: internal error: {describe(exc)}", file=sys.stderr)
        if debug:
            _print_trace()
            print(
                "recharge-atlas: please report this trace and the command you ran", file=sys.stderr
            )
        else:
            print(
                "recharge-atlas: no output was written; rerun with --debug for the full trace, "
                "and please report it",
                file=sys.stderr,
            )
        return EXIT_INTERNAL


def _print_trace():
    import traceback

    traceback.print_exc(file=sys.stderr)


def _command(args, parser=None):
    if args.command == "demo":
        _demo(args, parser)
        return EXIT_OK
    provenance = _provenance(parser.commands["run"], args) if parser is not None else None
    run_files(
        args.gauges,
        args.catchments,
        args.discharge,
        args.out,
        _settings(args),
        args.map,
        _StderrReporter(),
        args.daily,
        subbasins=args.subbasins,
        report_path=args.report,
        year_maps_path=args.year_maps,
        scheme=args.classes.replace("-", "_"),
        classes=args.class_count,
        gauges_per_group=args.gauges_per_group,
        provenance=provenance,
        overwrite=args.overwrite,
        precipitation_raster=args.precipitation_raster,
    )
    from recharge_atlas.algorithms.database import describe

    written = [describe(p) for p in (args.out, args.map, args.year_maps, args.report) if p]
    print("wrote " + ", ".join(written))
    return EXIT_OK


if __name__ == "__main__":
    raise SystemExit(main())
