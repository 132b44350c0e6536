"""Reading layers and tables from files: GeoPackages, shapefiles, CSV (encoding and separator
sniffed), Parquet and any vector format; and a large discharge table read in gauge groups.
Every failure is an :class:`InputError` naming the file.
"""

from __future__ import annotations

import collections
import os
import re
import sys
from contextlib import contextmanager
from pathlib import Path

import numpy as np
import pandas as pd
from pandas.api.types import union_categoricals

from .errors import InputError, listed, quoted
from .outputs import (
    _TemporaryFolder,
    disk_full,
)

#: File suffixes read as delimited text.
TEXT_SUFFIXES = {".csv", ".txt", ".tsv"}


#: Text tables: only an empty cell is missing; ``NA`` or ``None`` stay text (a gauge may be
#: called NA), and the core reads markers such as ``n/a`` in a value field as missing values,
#: the same whether the table came from here or from QGIS.
TEXT_MISSING = {"keep_default_na": False, "na_values": [""]}


def split_layer(path):
    """Split ``'file.gpkg|layername=gauges'`` (QGIS style) into the file and the layer name."""
    text = str(path)
    if "|layername=" in text:
        file_part, layer = text.split("|layername=", 1)
        return Path(file_part), layer.split("|", 1)[0]
    return Path(text), None


def _existing(path, what):
    file_path, layer = split_layer(path)
    if not file_path.exists():
        raise InputError(f"the {what} file does not exist", file=str(file_path))
    if file_path.is_dir() and file_path.suffix.lower() not in {".gdb"}:
        raise InputError(f"the {what} path is a folder, not a file", file=str(file_path))
    if not file_path.is_dir() and not file_path.is_file():  # reading a pipe could wait forever
        raise InputError(
            f"the {what} path is not a regular file (a pipe, socket or device): save the data "
            "to a file and give that",
            file=str(file_path),
        )
    if file_path.is_file():
        if not os.access(file_path, os.R_OK):
            raise InputError(f"the {what} file cannot be read (no permission)", file=str(file_path))
        if file_path.stat().st_size == 0:
            raise InputError(f"the {what} file is empty", file=str(file_path))
        _check_signature(file_path, what)
    return file_path, layer


#: How files of a format begin (the first bytes), by file suffix, and the format's name.
_SIGNATURES = {
    ".gpkg": (b"SQLite format 3\x00", "GeoPackage"),
    ".sqlite": (b"SQLite format 3\x00", "SQLite/SpatiaLite database"),
    ".parquet": (b"PAR1", "Parquet file"),
    ".shp": (b"\x00\x00\x27\x0a", "shapefile"),
}


def _check_signature(file_path, what):
    """A clear error when a file's first bytes are not those of the format its name says."""
    expected = _SIGNATURES.get(file_path.suffix.lower())
    if expected is None:
        return
    start, kind = expected
    with open(file_path, "rb") as handle:
        head = handle.read(len(start))
    if head != start:
        raise InputError(
            f"the {what} file is not a {kind}, though its name ends in {file_path.suffix}",
            file=str(file_path),
        )
    if file_path.suffix.lower() == ".shp":
        _check_shapefile_length(file_path, what)


def _check_shapefile_length(file_path, what):
    """A clear error when a .shp file is shorter than its header says (a copy cut short):
    GDAL would read the missing shapes as empty geometries without a word."""
    with open(file_path, "rb") as handle:
        header = handle.read(28)
    if len(header) < 28:
        stated = 100
    else:
        stated = 2 * int.from_bytes(header[24:28], "big")  # file length in 16-bit words
    size = file_path.stat().st_size
    if size < stated:
        raise InputError(
            f"the {what} file looks damaged: it holds {size:,} bytes where its header says "
            f"{stated:,} (cut short while copying?)",
            file=str(file_path),
        )


def read_layer(path, what="layer"):
    """Read a vector layer (any format GDAL reads, or a PostGIS table given as
    ``postgresql://…|layername=schema.table``: see :mod:`.database`) as a GeoDataFrame."""
    import geopandas as gpd

    from . import database

    if database.is_database(path):
        return database.read_layer(path, what)
    file_path, layer = _existing(path, what)
    try:
        frame = gpd.read_file(file_path, layer=layer) if layer else gpd.read_file(file_path)
    except Exception as exc:  # the readers raise many types; the user needs one sentence
        raise _layer_error(exc, file_path, layer, what) from None
    if file_path.suffix.lower() == ".shp" and not _beside(file_path, ".dbf"):
        from .discharge import NO_FIELDS_REASON

        frame.attrs[NO_FIELDS_REASON] = (
            f"its attribute file {file_path.stem}.dbf is missing beside the .shp"
        )
    return frame


def _beside(file_path, suffix):
    """Whether a file of the same name with ``suffix`` (any letter case) lies beside it."""
    wanted = (file_path.stem + suffix).lower()
    try:
        return any(p.name.lower() == wanted for p in file_path.parent.iterdir())
    except OSError:
        return True


def _layer_error(exc, file_path, layer, what):
    """The InputError for a layer GDAL could not read, in our words where we know them."""
    text = _first_line(exc)
    lower = text.lower()
    if "not recognized as" in lower and "format" in lower:
        message = f"the {what} file is not in a vector format that GDAL reads"
    elif layer is not None and ("layer" in lower or "not found" in lower):
        names = _layer_names(file_path)
        message = f"the {what} file has no layer {quoted(layer)}"
        if names:
            message += f"; layers found: {listed(names)}"
    else:
        message = f"the {what} file could not be read as a vector layer: {_reason(exc, file_path)}"
    return InputError(message, file=str(file_path))


def _layer_names(file_path):
    """The layers of a vector file ([] when they cannot be listed)."""
    try:
        import pyogrio

        return [str(name) for name in pyogrio.list_layers(file_path)[:, 0]]
    except Exception:
        pass
    try:
        import fiona

        return list(fiona.listlayers(str(file_path)))
    except Exception:
        return []


def _reason(exc, file_path=None):
    """The first line of a reader's error, without the file path it repeats."""
    text = _first_line(exc)
    if file_path is not None:
        text = text.replace(f"'{file_path}'", "the file").replace(str(file_path), "the file")
    return text


def read_table(path, what="discharge table", id_fields=()):
    """Read a table: CSV/TSV text, Parquet, or the attribute table of any vector source.

    Text files are read with every column as text; the core converts ids, dates and values
    itself, so gauge ids keep their leading zeros. Text columns of a Parquet file named in
    ``id_fields`` (a gauge id repeated on every day) are read as categories: a small code per
    row instead of a text per row.
    """
    from . import database

    if database.is_database(path):
        return database.read_table(path, what)
    file_path, layer = _existing(path, what)
    suffix = file_path.suffix.lower()
    try:
        if suffix in TEXT_SUFFIXES:
            encoding = _text_encoding(file_path, what)
            return pd.read_csv(
                file_path,
                dtype=str,
                sep=_separator(file_path, encoding),
                skipinitialspace=True,
                encoding=encoding,
                **TEXT_MISSING,
            )
        if suffix == ".parquet":
            return _read_parquet(file_path, id_fields)
        frame = read_layer(path, what)
    except InputError:
        raise
    except ImportError:  # pandas found no Parquet engine
        raise InputError(_NO_PARQUET, file=str(file_path)) from None
    except Exception as exc:
        raise _text_error(exc, file_path, what) from None
    if "geometry" in frame.columns:
        frame = pd.DataFrame(frame.drop(columns="geometry"))
    return frame


def _is_text(kind):
    """Whether an Arrow type is text (read as categories when it holds gauge ids)."""
    import pyarrow as pa

    return pa.types.is_string(kind) or pa.types.is_large_string(kind)


def _read_parquet(file_path, id_fields=()):
    """A Parquet file whole, its text columns in ``id_fields`` as categories.

    Read through Arrow's own reader with the system's allocator, each column's Arrow memory
    freed as soon as it is converted, and freed memory handed back: for 2,000 gauges x 30
    years (21.9 million rows) the read peaked 740 MB above the start against 1,146 MB through
    ``pandas.read_parquet``, and held 488 MB after against 750 MB (issue 17).
    """
    try:
        import pyarrow.parquet as pq
    except ImportError:
        return pd.read_parquet(file_path)  # pandas says which engine is missing
    schema = pq.read_schema(file_path)
    wanted = [
        name
        for name in dict.fromkeys(id_fields)
        if name in schema.names and _is_text(schema.field(name).type)
    ]
    with _system_arrow_memory():
        table = pq.read_table(file_path, read_dictionary=wanted or None)
        frame = table.to_pandas(self_destruct=True, split_blocks=True)
        del table
    _hand_back_memory()
    return frame


#: What to do when Parquet cannot be read: pyarrow is the one engine we use.
_NO_PARQUET = (
    "reading Parquet needs the Python package pyarrow: install it (pip install pyarrow, into "
    "the Python that runs the tool; Debian 12 packages no pyarrow) or save the table as CSV"
)


def _text_error(exc, file_path, what):
    """The InputError for a table the reader could not parse, in our words where we know the
    fault (a row with more fields than the header, a quote never closed), with its line."""
    text = _reason(exc, file_path)
    more = re.search(r"Expected (\d+) fields in line (\d+), saw (\d+)", text)
    if more:
        header, line, seen = (int(g) for g in more.groups())
        if header == 1:
            message = (
                f"the {what} file has {seen} fields on line {line} where its first line has 1: "
                "are there lines (a title, comments) before the header? remove them"
            )
        else:
            message = (
                f"the {what} file has {seen} fields on line {line} where its header has "
                f"{header}: a value with the separator in it needs quotes"
            )
        return InputError(message, file=str(file_path))
    quote = re.search(r"EOF inside string starting (?:at|on) (?:row|line) (\d+)", text)
    if quote or "EOF inside string" in text or "unexpected end of data" in text:
        where = f" on line {int(quote.group(1)) + 1}" if quote else ""
        return InputError(
            f'the {what} file has a quote{where} that is never closed (a stray " in a value?)',
            file=str(file_path),
        )
    return InputError(f"the {what} file could not be read: {text}", file=str(file_path))


#: Bytes looked at to tell a text table from a binary file and to find its encoding.
_SNIFF_BYTES = 1 << 20


# Encoding and separator by hand, measured against libraries (issue 17; ``python
# benchmarks/libraries.py``): on nine tables (comma, semicolon, tab, UTF-8 with a byte-order
# mark, UTF-16 with and without one, Latin-1, one column, semicolons with quoted commas) ours
# found every encoding and separator in 0.2-0.3 ms in all; csv.Sniffer (standard library,
# separator only) took 3.7-4.8 ms and raised csv.Error on the one-column table;
# charset-normalizer (encoding only; in Debian's Python, not a dependency) took 5.7 ms and read
# the Latin-1 table as cp1250. Kept because it measures better.
def _text_encoding(file_path, what):
    """The encoding of a text table: UTF-8 (with or without a byte-order mark), else Latin-1
    (Windows exports). A file holding NUL bytes is not text: a clear error says so."""
    with open(file_path, "rb") as handle:
        head = handle.read(_SNIFF_BYTES)
    utf16 = _utf16(head)
    if utf16:
        return utf16
    if b"\x00" in head:
        raise InputError(
            f"the {what} file is not a text table (it holds binary data; is it another format "
            f"renamed {file_path.suffix}?)",
            file=str(file_path),
        )
    try:
        head.decode("utf-8")
    except UnicodeDecodeError as exc:
        if exc.start < len(head) - 4:  # not just a character cut at the end of the sample
            return "latin-1"
    return "utf-8-sig"


def _utf16(head):
    """``'utf-16'`` (with a byte-order mark), ``'utf-16-le'`` or ``'utf-16-be'`` when these
    first bytes are UTF-16 text (Windows tools write it), else None."""
    if head[:2] in (b"\xff\xfe", b"\xfe\xff"):
        return "utf-16"
    sample = head[: 1 << 12]
    sample = sample[: len(sample) // 2 * 2]
    if len(sample) < 4:
        return None
    even, odd = sample[0::2], sample[1::2]
    if odd.count(0) == len(odd) and even.count(0) == 0:
        return "utf-16-le"
    if even.count(0) == len(even) and odd.count(0) == 0:
        return "utf-16-be"
    return None


def _separator(file_path, encoding="utf-8-sig"):
    """The column separator of a text table, judged from its first line (comma by default)."""
    if file_path.suffix.lower() == ".tsv":
        return "\t"
    with open(file_path, encoding=encoding, errors="replace") as handle:
        first = handle.readline()
    counts = {sep: first.count(sep) for sep in (",", ";", "\t", "|")}
    best = max(counts, key=counts.get)
    return best if counts[best] else ","


#: A discharge table file larger than this is read gauge group by gauge group (bytes).
STREAM_BYTES = 256 * 1024**2


#: Gauges per group when a large table is read in groups.
GAUGES_PER_GROUP = 500


def discharge_groups(
    path,
    gauge_field,
    gauge_ids,
    gauges_per_group=GAUGES_PER_GROUP,
    what="discharge table",
    date_field=None,
):
    """Read a discharge table a gauge group at a time: every row of each group's gauges.

    Only one group's rows are in memory at a time, so tables far larger than memory can be
    processed. Parquet is filtered by gauge id (row groups whose statistics rule the gauges out
    are skipped); text tables are read once in chunks and split into one temporary file per
    group beside nothing else, removed afterwards. Other formats are read whole. Rows of gauges
    that are not in ``gauge_ids`` are left out; when no row belongs to any of them, a last
    group of a few rows of other ids is given instead, so the run can say which ids the table
    holds. A text table's ``date_field`` is read as categories too: a network's gauges share
    their days, so each day's text is held once.
    """
    file_path, _layer = _existing(path, what)
    gauge_ids = list(gauge_ids)
    size = max(int(gauges_per_group), 1)
    batches = [gauge_ids[i : i + size] for i in range(0, len(gauge_ids), size)]
    suffix = file_path.suffix.lower()
    _large_arrays_apart()
    if suffix == ".parquet":
        with _system_arrow_memory():
            yield from _parquet_groups(file_path, gauge_field, batches, what)
    elif suffix in TEXT_SUFFIXES:
        with _system_arrow_memory():  # pandas 3 keeps text columns in Arrow's memory
            yield from _text_groups(file_path, gauge_field, batches, what, date_field)
    else:
        yield read_table(path, what)


@contextmanager
def _system_arrow_memory():
    """Arrow allocates from the system's allocator while the groups are read: its own keeps
    what a group freed for later, the system's hands it back, so one group's memory is not
    still held while the next is read (nothing when pyarrow is not installed)."""
    try:
        import pyarrow as pa
    except ImportError:
        yield
        return
    previous = pa.default_memory_pool()
    pa.set_memory_pool(pa.system_memory_pool())
    try:
        yield
    finally:
        pa.set_memory_pool(previous)


def _parquet_groups(file_path, gauge_field, batches, what):
    try:
        import pyarrow as pa
        import pyarrow.parquet as pq
    except ImportError:
        raise InputError(_NO_PARQUET, file=str(file_path)) from None
    try:
        schema = pq.ParquetFile(file_path).schema_arrow
    except Exception as exc:
        raise InputError(
            f"the {what} file could not be read: {_first_line(exc)}", file=str(file_path)
        ) from None
    from .discharge import require_columns

    require_columns(pd.DataFrame(columns=schema.names), [gauge_field], what, file=str(file_path))
    kind = schema.field(gauge_field).type
    found = False
    for batch in batches:
        if pa.types.is_integer(kind) or pa.types.is_floating(kind):
            values = [
                float(g) if pa.types.is_floating(kind) else int(g) for g in batch if _is_number(g)
            ]
        else:
            values = [str(g) for g in batch]
        if not values:
            continue
        _hand_back_memory()  # the previous group is let go by now
        held = [_parquet_rows_of(file_path, gauge_field, values, kind)]
        found = found or len(held[0]) > 0
        yield held.pop()  # handed over: this generator keeps no reference to it
    if not found:  # no row of any gauge: a few rows say which ids the table holds
        for rows in pq.ParquetFile(file_path).iter_batches(batch_size=10_000):
            yield rows.to_pandas().drop_duplicates(gauge_field).head(_SAMPLE_IDS)
            break


def _parquet_rows_of(file_path, gauge_field, values, kind):
    """Every row of a Parquet file whose gauge is one of ``values``, as a DataFrame.

    Read one row group at a time and filtered at once, so memory holds the rows kept plus one
    row group; row groups whose statistics rule the gauges out are not read.
    """
    import pyarrow as pa
    import pyarrow.compute as pc
    import pyarrow.parquet as pq

    text_ids = _is_text(kind)
    # Text ids come as a dictionary (a category column: a small number a row, not the text).
    source = pq.ParquetFile(file_path, read_dictionary=[gauge_field] if text_ids else None)
    wanted = pa.array(values, type=kind) if not pa.types.is_dictionary(kind) else pa.array(values)
    column = source.schema_arrow.get_field_index(gauge_field)
    low, high = min(values), max(values)
    parts = []
    for group in range(source.metadata.num_row_groups):
        if _rules_out(source.metadata.row_group(group).column(column).statistics, low, high):
            continue
        table = source.read_row_group(group, use_threads=False)
        parts.append(table.filter(pc.is_in(table[gauge_field], value_set=wanted)))
        del table
    if not parts:
        return source.schema_arrow.empty_table().to_pandas()
    frame = pa.concat_tables(parts).to_pandas()
    del parts
    pool = pa.default_memory_pool()
    if hasattr(pool, "release_unused"):
        pool.release_unused()  # hand the row groups' memory back before the hydrology runs
    return frame


#: Arrays at least this large (bytes) get memory of their own from the system while a table is
#: read in gauge groups (see :func:`_large_arrays_apart`).
_APART_BYTES = 4 << 20


def _large_arrays_apart():
    """Have glibc give each large array memory of its own, handed back the moment it is freed.

    By default glibc raises that threshold after the first large array is freed, and later ones
    come from its heap, where a freed array caught between live small pieces cannot be handed
    back: group after group the heap grows (2000 gauges in 8 groups: 430 MB of heap, 310 MB of
    it free). A fixed threshold keeps the heap to what is in use. Linux with glibc only;
    elsewhere nothing. It stays set for the process (a run reading in groups is a command-line
    run, its own process).
    """
    _ask_glibc("mallopt", -3, _APART_BYTES)  # -3: M_MMAP_THRESHOLD


def _hand_back_memory():
    """Return freed memory to the system (glibc keeps some for reuse; elsewhere nothing)."""
    _ask_glibc("malloc_trim", 0)


def _ask_glibc(function, *arguments):
    """Call one of glibc's allocator functions on Linux; elsewhere (or without it) nothing."""
    if not sys.platform.startswith("linux"):
        return
    import ctypes
    import ctypes.util

    try:
        getattr(ctypes.CDLL(ctypes.util.find_library("c")), function)(*arguments)
    except (OSError, AttributeError, TypeError):
        pass


def _rules_out(statistics, low, high):
    """Whether a row group's statistics show no gauge id between ``low`` and ``high``."""
    try:
        if statistics is None or not statistics.has_min_max:
            return False
        return bool(statistics.max < low or statistics.min > high)
    except TypeError:  # statistics of another type than the ids: read the row group
        return False


#: When no row of a table read in gauge groups belongs to a gauge, rows of this many other ids
#: are passed on, so the run can say which ids the table holds.
_SAMPLE_IDS = 5


def _is_number(text):
    try:
        return float(text) == int(float(text))
    except (TypeError, ValueError, OverflowError):
        return False


def _text_groups(file_path, gauge_field, batches, what, date_field=None):
    from .discharge import gauge_id_text, require_columns

    group_of = {gid: i for i, batch in enumerate(batches) for gid in batch}
    encoding = _text_encoding(file_path, what)
    sep = _separator(file_path, encoding)
    with _TemporaryFolder("groups") as folder:
        written = set()
        samples = []
        reader = pd.read_csv(
            file_path,
            dtype=str,
            sep=sep,
            skipinitialspace=True,
            chunksize=500_000,
            encoding=encoding,
            **TEXT_MISSING,
        )
        try:
            for chunk in reader:
                require_columns(chunk, [gauge_field], what, file=str(file_path))
                groups = np.array(
                    [group_of.get(g, -1) for g in gauge_id_text(chunk[gauge_field].to_numpy())]
                )
                for group in np.unique(groups[groups >= 0]):
                    target = Path(folder) / f"{group}.csv"
                    chunk[groups == group].to_csv(
                        target, mode="a", header=group not in written, index=False
                    )
                    written.add(int(group))
                if len(samples) < _SAMPLE_IDS and (groups < 0).any():
                    others = chunk[groups < 0].drop_duplicates(gauge_field)
                    samples.append(others.head(_SAMPLE_IDS - len(samples)))
        except InputError:
            raise
        except Exception as exc:
            full = disk_full(exc, folder, f"splitting the {what} into gauge groups")
            if full is not None:
                raise full from None
            raise _text_error(exc, file_path, what) from None
        for group in range(len(batches)):
            if group in written:
                _hand_back_memory()  # the previous group is let go by now
                yield _read_group_file(Path(folder) / f"{group}.csv", gauge_field, date_field)
        if not written and samples:  # no row of any gauge: a few rows say which ids it holds
            yield pd.concat(samples, ignore_index=True)


#: Rows read at a time from a gauge group's temporary text file.
GROUP_FILE_ROWS = 1 << 17


def _read_group_file(path, gauge_field, date_field=None):
    """A gauge group's rows from its temporary text file: text, as any table is read, with the
    ids and the dates as categories (small numbers a row: both repeat, ids on every row of a
    gauge and days across gauges, and as text they would be most of the group's memory).

    Read a slice of rows at a time and joined: the reader holds each value as a Python string
    before the column takes it, and a slice's strings are let go before the next is read
    (a group of 100 gauges × 30 years: 105 MB at the peak read whole, 77 MB so).
    """
    repeated = list(dict.fromkeys(name for name in (gauge_field, date_field) if name))
    dtypes = collections.defaultdict(lambda: str, {name: "category" for name in repeated})
    reader = pd.read_csv(path, dtype=dtypes, chunksize=GROUP_FILE_ROWS, **TEXT_MISSING)
    with reader:
        slices = list(reader)
    if len(slices) == 1:
        return slices[0]
    columns = list(slices[0].columns)
    # Joined apart: the slices' categories differ, and pd.concat would turn them into text.
    joined = {
        name: union_categoricals([part.pop(name) for part in slices], sort_categories=True)
        for name in repeated
        if name in columns
    }
    frame = pd.concat(slices, ignore_index=True)
    for name in columns:
        if name in joined:
            frame.insert(columns.index(name), name, joined[name])
    return frame


def _first_line(exc):
    text = str(exc).strip().splitlines()
    return text[0] if text else type(exc).__name__
