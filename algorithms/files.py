"""Reading and writing files: the only module of the core that touches the disk.

Layers are read with geopandas (fiona or pyogrio, whichever is installed); tables from CSV,
Parquet or any vector format. Results are written to a temporary file beside the target and
moved into place only when complete, so a failed or cancelled run leaves no partial output.
"""

from __future__ import annotations

import collections
import datetime as _dt
import errno
import functools
import itertools
import os
import re
import sqlite3
import sys
import tempfile
from contextlib import contextmanager
from pathlib import Path

import numpy as np
import pandas as pd
from pandas.api.types import union_categoricals

from .errors import InputError, describe, listed, one_line, quoted

#: The GeoPackage version written (the ``VERSION`` creation option of GDAL's driver). GDAL 3.8
#: and later write 1.4 by default, which GDAL 3.6 (QGIS 3.22 on Debian 12) opens with a warning
#: that it "may only be partially supported"; 1.2 holds everything written here and every
#: supported QGIS reads it cleanly.
GPKG_VERSION = "1.2"

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


def read_table(path, what="discharge table"):
    """Read a table: CSV/TSV text, Parquet, or the attribute table of any vector source.

    Text files are read with every column as text; the core converts ids, dates and values
    itself, so gauge ids keep their leading zeros.
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
            return pd.read_parquet(file_path)
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


#: What to do when Parquet cannot be read: pyarrow is the one engine we use.
_NO_PARQUET = (
    "reading Parquet needs the Python package pyarrow: install it (pip install pyarrow; "
    "on Debian and in QGIS's Python: apt install python3-pyarrow) or save the table as CSV"
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

    text_ids = pa.types.is_string(kind) or pa.types.is_large_string(kind)
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


# --------------------------------------------------------------------------- writing


def check_output(path, what="output"):
    """Raise :class:`InputError` unless ``path`` can be written: its folder exists and is
    writable, the path itself is not a folder, its name fits the file system, and a file
    already there is neither read-only nor of another format (it would be replaced without a
    word). Called before a run, so a bad output path fails at once rather than after the work."""
    target = Path(path)
    folder = target.parent if str(target.parent) else Path(".")
    _check_name_length(target, what)
    if target.is_dir():
        raise InputError(f"the {what} path is a folder; give a file name", file=str(target))
    if not folder.exists():
        raise InputError("the output folder does not exist", file=str(folder))
    if not folder.is_dir():
        raise InputError("the output folder is a file, not a folder", file=str(folder))
    if not os.access(folder, os.W_OK):
        raise InputError("the output folder is not writable", file=str(folder))
    _check_existing_output(target, what)
    return target


def _check_name_length(target, what):
    """A file name (or a path) too long for the file system fails now, not after the work.

    ``os.stat`` asks the file system itself, so its own limit applies (255 bytes on most).
    """
    try:
        os.stat(target)
    except OSError as exc:
        if exc.errno != errno.ENAMETOOLONG:
            return
        name = len(os.fsencode(target.name))
        raise InputError(
            f"the {what} file name is too long for the file system ({name} bytes; "
            f"{_name_limit(target)}); choose a shorter name",
            file=one_line(str(target), 80),
        ) from None


def _name_limit(target):
    folder = target.parent if str(target.parent) else Path(".")
    try:
        return f"at most {os.pathconf(folder, 'PC_NAME_MAX')} for a name"
    except (OSError, ValueError, AttributeError):
        return "or the whole path is too long"


#: How an existing output file of each kind begins: it is replaced only when it is one.
_OUTPUT_SIGNATURES = {
    ".gpkg": (b"SQLite format 3\x00", "GeoPackage"),
    ".png": (b"\x89PNG\r\n\x1a\n", "PNG image"),
}


def _check_existing_output(target, what):
    """Refuse to replace a read-only file, or a file that is not of the output's format.

    An earlier result of the same kind is replaced (that is what a rerun wants); a file the
    user made read-only, or something else under the output's name (an empty file aside), is
    refused: the user removes it or chooses another name.
    """
    try:
        info = os.stat(target)
    except OSError:
        return
    if not os.path.isfile(target):
        raise InputError(f"the {what} path exists and is not a file", file=str(target))
    if not (info.st_mode & 0o222) or not os.access(target, os.W_OK):
        raise InputError(
            f"the {what} file exists and is read-only; it is not replaced", file=str(target)
        )
    expected = _OUTPUT_SIGNATURES.get(target.suffix.lower())
    if expected is None or info.st_size == 0:
        return
    start, kind = expected
    try:
        with open(target, "rb") as handle:
            head = handle.read(len(start))
    except OSError as exc:
        raise InputError(
            f"the {what} file exists and cannot be read: {exc.strerror or describe(exc)}",
            file=str(target),
        ) from None
    if head != start:
        raise InputError(
            f"the {what} file exists and is not a {kind}, so it is not replaced; remove it "
            "or choose another name",
            file=str(target),
        )


# --------------------------------------------------------------------------- temporary files
#
# Every temporary file or folder of a run carries ``~ra-<where>-<pid>-`` in its name: ``where``
# stands for this machine, its boot and its process-id namespace, ``pid`` for the process. A
# process killed outright (SIGKILL, the out-of-memory killer) cannot clean up; the next run
# removes what such a process left, and only that: a name of ours, made here since the last
# boot, owned by the user, by a process that no longer exists (:func:`remove_dead_leftovers`).

_OWNER_TAG = re.compile(r"~ra-(?P<where>[0-9a-f]{8})-(?P<pid>[0-9]+)-")
#: Hidden files beside an output (with SQLite's journal files).
_BESIDE = re.compile(
    r"^\..*\.~ra-[0-9a-f]{8}-[0-9]+-[a-z0-9_]+\.[A-Za-z0-9]+(-journal|-wal|-shm)?$"
)
#: Folders in the temporary folder, and the files they may hold.
_TEMP_FOLDER = re.compile(r"^recharge-atlas-(tables|groups)-~ra-[0-9a-f]{8}-[0-9]+-[a-z0-9_]+$")
_TEMP_FOLDER_FILE = re.compile(r"^(tables\.sqlite(-journal|-wal|-shm)?|[0-9]+\.csv)$")


@functools.lru_cache(maxsize=1)
def _where():
    """Eight hex digits for this machine, boot and process-id namespace (None where the boot
    cannot be told: then no leftover is ever judged dead)."""
    import hashlib
    import socket

    try:
        with open("/proc/sys/kernel/random/boot_id", encoding="ascii") as handle:
            boot = handle.read().strip()
        namespace = os.readlink("/proc/self/ns/pid")
    except OSError:
        return None
    text = f"{socket.gethostname()}|{boot}|{namespace}"
    return hashlib.sha1(text.encode("utf-8")).hexdigest()[:8]


def owner_tag():
    """The mark this process puts in the names of its temporary files and folders."""
    return f"~ra-{_where() or '00000000'}-{os.getpid()}-"


def _process_exists(pid):
    if pid == os.getpid():
        return True
    try:
        os.kill(pid, 0)
    except ProcessLookupError:
        return False
    except (PermissionError, OSError, ValueError, OverflowError):
        return True  # exists (another user's) or cannot be told: alive
    return True


def _left_by_dead_process(name):
    """Whether a name carries our mark, made on this machine since its boot by a process
    that no longer exists."""
    match = _OWNER_TAG.search(name)
    where = _where()
    if match is None or where is None or os.name != "posix" or match["where"] != where:
        return False
    return not _process_exists(int(match["pid"]))


def _own_file(path):
    """A regular file (not a link) of this user."""
    try:
        info = os.lstat(path)
    except OSError:
        return False
    import stat

    return stat.S_ISREG(info.st_mode) and info.st_uid == os.getuid()


def remove_dead_leftovers(folders=()):
    """Remove the temporary files and folders that killed runs left behind.

    Looks in ``folders`` (the outputs' folders) for hidden files beside outputs, and in the
    temporary folder for the run's table and group folders. Removes only what is provably
    ours and dead (see the note above :func:`owner_tag`); anything else is left alone.
    Returns the number of files removed and their bytes.
    """
    removed, size = 0, 0
    if os.name != "posix" or _where() is None:
        return removed, size
    places = dict.fromkeys(Path(f) for f in folders)
    for folder in places:
        try:
            names = os.listdir(folder)
        except OSError:
            continue
        for name in names:
            path = folder / name
            if _BESIDE.match(name) and _left_by_dead_process(name) and _own_file(path):
                removed, size = _unlink_counted(path, removed, size)
    temp = Path(tempfile.gettempdir())
    try:
        names = os.listdir(temp)
    except OSError:
        names = []
    for name in names:
        folder = temp / name
        if not (_TEMP_FOLDER.match(name) and _left_by_dead_process(name)):
            continue
        try:
            info = os.lstat(folder)
            inside = os.listdir(folder)
        except OSError:
            continue
        import stat

        if not stat.S_ISDIR(info.st_mode) or info.st_uid != os.getuid():
            continue
        if not all(_TEMP_FOLDER_FILE.match(n) and _own_file(folder / n) for n in inside):
            continue  # something we did not make: leave the folder as it is
        for n in inside:
            removed, size = _unlink_counted(folder / n, removed, size)
        try:
            folder.rmdir()
        except OSError:
            pass
    return removed, size


def _unlink_counted(path, removed, size):
    try:
        bytes_ = os.lstat(path).st_size
        os.unlink(path)
    except OSError:
        return removed, size
    return removed + 1, size + bytes_


def temporary_folder(kind):
    """A new folder in the temporary folder for a run's ``kind`` (``tables``, ``groups``),
    named so a later run can tell it was left by a killed one."""
    return tempfile.mkdtemp(prefix=f"recharge-atlas-{kind}-{owner_tag()}")


class _TemporaryFolder:
    """``with _TemporaryFolder(kind) as folder:`` a :func:`temporary_folder`, removed at the
    end whatever happens."""

    def __init__(self, kind):
        self.path = temporary_folder(kind)

    def __enter__(self):
        return self.path

    def __exit__(self, *exc):
        import shutil

        shutil.rmtree(self.path, ignore_errors=True)
        return False


def _temporary_beside(target):
    """A free temporary name beside ``target`` (hidden, same suffix); the file is not created.

    The name keeps at most 40 characters of the target's, so it fits wherever the target fits.
    """
    folder = target.parent if str(target.parent) else Path(".")
    stem = target.stem[:40]
    try:
        handle, temp = tempfile.mkstemp(
            prefix=f".{stem}.{owner_tag()}", suffix=target.suffix, dir=folder
        )
    except OSError as exc:
        raise _not_written(exc, target) from None
    os.close(handle)
    os.unlink(temp)  # writers want to create the file themselves
    return temp


def _remove_leftovers(temp):
    for leftover in (temp, temp + "-journal", temp + "-wal", temp + "-shm"):
        if os.path.lexists(leftover):
            try:
                os.unlink(leftover)
            except OSError:
                pass


@contextmanager
def atomic_path(target):
    """Yield a temporary path beside ``target``; move it into place only on success.

    On any failure the temporary file (and SQLite's journal files) is removed, so no partial
    output remains; a failure of the disk or the file system (:class:`OSError`: full,
    read-only, no permission, or a writer's own words for a full disk) becomes an
    :class:`InputError` naming the target.
    """
    target = check_output(target)
    temp = _temporary_beside(target)
    try:
        try:
            yield Path(temp)
        except OSError as exc:
            raise _not_written(exc, target) from None
        except InputError:
            raise
        except Exception as exc:
            full = disk_full(exc, target, written=[temp])
            if full is None:
                raise
            raise full from None
        _move_into_place(temp, target)
    finally:
        _remove_leftovers(temp)


#: How writers say the disk is full or a file outgrew what is allowed: errno, or words
#: (SQLite: "database or disk is full"; GDAL: "No space left on device", "File too large").
_FULL_WORDS = ("no space left on device", "database or disk is full", "disk full")
_TOO_LARGE_WORDS = ("file too large", "file size limit exceeded")


def disk_full(exc, target, doing="writing the output", written=()):
    """The :class:`InputError` for a full disk (or a file outgrowing the file-size limit)
    while ``doing`` (naming the file ``target``), or None when ``exc`` is something else.

    Writers say it in their own ways: an :class:`OSError` with ``ENOSPC`` / ``EDQUOT`` /
    ``EFBIG``, or a library error whose text says so. GDAL and SQLite often lose the reason
    ("Failed to commit transaction", "disk I/O error"), so after a writer's error the file
    system is asked: almost no free space left where the files go (``written``, ``target``),
    or a file written while the process has a file-size limit (``ulimit -f``).
    """
    reason = _disk_reason(exc, target, written)
    if reason is None:
        return None
    return InputError(f"{reason} while {doing}", file=None if target is None else str(target))


#: Below this many free bytes, a writer's unexplained failure is put down to a full disk.
NEARLY_FULL_BYTES = 1 << 20
#: Libraries whose errors may hide a full disk (GDAL's Python bindings and readers).
_WRITER_MODULES = {"sqlite3", "pyogrio", "fiona", "osgeo"}


def _disk_reason(exc, target, written):
    number = getattr(exc, "errno", None)
    text = str(exc).lower()
    full = "no space left on device"
    too_large = "a file reached the file size limit"
    if number in (errno.ENOSPC, getattr(errno, "EDQUOT", errno.ENOSPC)):
        return full
    if number == errno.EFBIG or any(word in text for word in _TOO_LARGE_WORDS):
        return too_large
    if any(word in text for word in _FULL_WORDS):
        return full
    module = type(exc).__module__.split(".")[0]
    from_writer = module in _WRITER_MODULES or text.startswith("gdal error")  # fiona: RuntimeError
    if isinstance(exc, OSError) or not from_writer:
        return None
    paths = [Path(p) for p in written] + ([Path(target)] if target is not None else [])
    for path in paths:
        folder = path if path.is_dir() else (path.parent if str(path.parent) else Path("."))
        try:
            space = os.statvfs(folder)
        except (OSError, AttributeError):
            continue
        if space.f_bavail * space.f_frsize < NEARLY_FULL_BYTES:
            return full
    limit = _file_size_limit()
    if limit is not None:  # a writer failed under a file-size limit: the likeliest cause
        return f"a file reached this process's file size limit (ulimit -f: {limit:,} bytes)"
    return None


def _file_size_limit():
    """The process's file-size limit in bytes (``ulimit -f``), or None when there is none."""
    try:
        import resource

        soft, _hard = resource.getrlimit(resource.RLIMIT_FSIZE)
    except (ImportError, OSError, ValueError, AttributeError):
        return None
    return None if soft == resource.RLIM_INFINITY else int(soft)


def _not_written(exc, target):
    """The error for an output the disk or the file system refused."""
    full = disk_full(exc, target)
    if full is not None:
        return full
    return InputError(
        f"the output could not be written: {exc.strerror or describe(exc)}", file=str(target)
    )


def _move_into_place(temp, target):
    try:
        os.replace(temp, target)
    except OSError as exc:
        raise _not_written(exc, target) from None


def same_file(a, b) -> bool:
    """Whether two paths name one file (through links, relative parts or hard links)."""
    try:
        if os.path.exists(a) and os.path.exists(b):
            return os.path.samefile(a, b)
        return Path(a).resolve() == Path(b).resolve()
    except OSError:
        return False


class StagedOutputs:
    """Several outputs written to temporary files beside their targets and moved into place
    together, once every one of them is complete (see :func:`staged_outputs`)."""

    def __init__(self):
        self.moves = []

    def path(self, target, what="output") -> Path:
        """The temporary path to write ``target`` to."""
        target = check_output(target, what)
        temp = _temporary_beside(target)
        self.moves.append((temp, target))
        return Path(temp)

    def commit(self):
        for temp, target in self.moves:
            _move_into_place(temp, target)

    def discard(self):
        for temp, _target in self.moves:
            _remove_leftovers(temp)


@contextmanager
def staged_outputs():
    """Write several outputs all or nothing.

    >>> with staged_outputs() as stage:                    # doctest: +SKIP
    ...     write_geopackage(result, stage.path("out.gpkg"))
    ...     save_figure(figure, stage.path("map.png"))

    Each ``stage.path(target)`` is a temporary name beside the target. When the block ends
    normally, every file moves into place; when it fails or is interrupted, every temporary
    file is removed and no target is touched.
    """
    stage = StagedOutputs()
    try:
        yield stage
        stage.commit()
    except InputError as exc:  # name the output the user gave, not its temporary file
        for temp, target in stage.moves:
            if exc.file is not None and str(exc.file) == str(temp):
                exc.file = None
                exc.located(file=str(target))
        raise
    except Exception as exc:
        temps = {str(temp): target for temp, target in stage.moves}
        full = disk_full(exc, temps.get(str(getattr(exc, "filename", None))), "writing the outputs")
        if full is not None:
            raise full from None
        if isinstance(exc, OSError):
            raise InputError(
                f"the output could not be written: {exc.strerror or describe(exc)}"
            ) from None
        raise
    finally:
        stage.discard()


#: Tables of a run's GeoPackage: name, result attribute, description.
RESULT_TABLES = (
    ("annual", "annual", "Recharge, baseflow and storage change by gauge and water year"),
    ("events", "events", "Recharge of each event by recession-curve displacement"),
    ("periods", "periods", "Recharge by gauge and month or season"),
    ("segments", "segments", "Recession segments behind each recession index"),
    (
        "master_recession",
        "master_recession",
        "Recession index by flow level (master recession curve)",
    ),
    ("links", "links", "How each gauge links to a catchment, or why it does not"),
)


def write_layer(frame, path, layer):
    """Write a GeoDataFrame as one layer of a GeoPackage of :data:`GPKG_VERSION` (added to
    the file when it exists)."""
    frame.to_file(path, layer=layer, driver="GPKG", VERSION=GPKG_VERSION)


def write_layer_style(db, layer, name, description, qml, geometry_column="geom"):
    """Store ``qml`` as the default QGIS style of ``layer`` in an open GeoPackage.

    QGIS's convention (QGIS writes the same table when a style is saved "in the datasource
    database"): table ``layer_styles`` with ``f_table_catalog`` and ``f_table_schema`` empty,
    ``f_table_name`` and ``f_geometry_column`` naming the layer, the style document in
    ``styleQML`` and ``useAsDefault`` true on the style QGIS applies when the layer opens. The
    table is listed among the contents as attributes, so GDAL sees it too.
    """
    now = pd.Timestamp.now(tz="UTC").tz_localize(None).floor("s")
    row = {
        "f_table_catalog": "",
        "f_table_schema": "",
        "f_table_name": layer,
        "f_geometry_column": geometry_column,
        "styleName": name,
        "styleQML": qml,
        "styleSLD": "",
        "useAsDefault": True,
        "description": description,
        "owner": "",
        "ui": "",
        "update_time": now + pd.Timedelta(milliseconds=1),  # a time, so DATETIME, not DATE
    }
    frame = pd.DataFrame([row])
    frame["update_time"] = frame["update_time"].astype("datetime64[ns]")
    add_attribute_table(db, "layer_styles", frame, "Styles of the layers, read by QGIS")


#: The GeoPackage metadata extension (OGC 12-128r15, annex F.8): its tables, as the standard
#: gives them, and the URI our own JSON provenance document is filed under.
METADATA_SQL = (
    "CREATE TABLE IF NOT EXISTS gpkg_metadata (id INTEGER CONSTRAINT m_pk PRIMARY KEY ASC NOT "
    "NULL, md_scope TEXT NOT NULL DEFAULT 'dataset', md_standard_uri TEXT NOT NULL, mime_type "
    "TEXT NOT NULL DEFAULT 'text/xml', metadata TEXT NOT NULL DEFAULT '')",
    "CREATE TABLE IF NOT EXISTS gpkg_metadata_reference (reference_scope TEXT NOT NULL, "
    "table_name TEXT, column_name TEXT, row_id_value INTEGER, timestamp DATETIME NOT NULL "
    "DEFAULT (strftime('%Y-%m-%dT%H:%M:%fZ','now')), md_file_id INTEGER NOT NULL, md_parent_id "
    "INTEGER, CONSTRAINT crmr_mfi_fk FOREIGN KEY (md_file_id) REFERENCES gpkg_metadata(id), "
    "CONSTRAINT crmr_mpi_fk FOREIGN KEY (md_parent_id) REFERENCES gpkg_metadata(id))",
    "CREATE TABLE IF NOT EXISTS gpkg_extensions (table_name TEXT, column_name TEXT, "
    "extension_name TEXT NOT NULL, definition TEXT NOT NULL, scope TEXT NOT NULL, CONSTRAINT "
    "ge_tce UNIQUE (table_name, column_name, extension_name))",
)
METADATA_EXTENSION = "http://www.geopackage.org/spec120/#extension_metadata"
PROVENANCE_URI = "urn:recharge-atlas:provenance:1"


def write_provenance(db, provenance):
    """Store where an output came from (a :class:`provenance.Provenance`) in an open
    GeoPackage: as the plain ``run`` table (any SQL user can read it) and as a JSON document
    in the GeoPackage metadata extension, referenced for the whole GeoPackage."""
    add_attribute_table(
        db, "run", provenance.table(), "How this output was made: version, inputs, settings"
    )
    for sql in METADATA_SQL:
        db.execute(sql)
    for table in ("gpkg_metadata", "gpkg_metadata_reference"):
        db.execute(
            "INSERT OR IGNORE INTO gpkg_extensions (table_name, column_name, extension_name, "
            "definition, scope) VALUES (?, NULL, 'gpkg_metadata', ?, 'read-write')",
            (table, METADATA_EXTENSION),
        )
    cursor = db.execute(
        "INSERT INTO gpkg_metadata (md_scope, md_standard_uri, mime_type, metadata) "
        "VALUES ('dataset', ?, 'application/json', ?)",
        (PROVENANCE_URI, provenance.as_json()),
    )
    db.execute(
        "INSERT INTO gpkg_metadata_reference (reference_scope, md_file_id) VALUES ('geopackage', ?)",
        (cursor.lastrowid,),
    )


def write_geopackage(
    result, path, daily=False, spill=None, scheme="quantiles", classes=5, provenance=None
):
    """Write a run's results as one GeoPackage.

    Layers ``catchments``, ``incremental_areas`` (and ``subbasins`` with a subbasin map); tables ``annual``,
    ``events``, ``periods``, ``segments``, ``master_recession`` and ``links``; with
    ``daily=True`` also ``daily`` (flow and baseflow of every day). Tables a large run kept on
    disk as it went (``spill``, a :class:`TableSpill`) are copied from there. The catchments
    layer carries its choropleth of mean annual recharge (classes by ``scheme`` and
    ``classes``) as its default QGIS style (:func:`write_layer_style`). ``provenance`` (a
    :class:`provenance.Provenance`) goes in as the ``run`` table and the GeoPackage's metadata
    (:func:`write_provenance`).
    """
    from .layer_style import recharge_style

    style = recharge_style(result.catchments, scheme=scheme, classes=classes)
    with atomic_path(path) as temp:
        write_layer(result.catchments, temp, "catchments")
        if getattr(result, "subbasins", None) is not None:
            write_layer(result.subbasins, temp, "subbasins")
        incremental = result.incremental_areas()
        if len(incremental):
            write_layer(incremental, temp, "incremental_areas")
        db = sqlite3.connect(temp)
        try:
            if spill is not None:
                db.execute("ATTACH DATABASE ? AS spill", (str(spill.path),))
            with db:
                for name, attribute, description in RESULT_TABLES:
                    if spill is not None and spill.holds(name):
                        spill.copy_into(db, name, description)
                    else:
                        add_attribute_table(db, name, getattr(result, attribute), description)
                if daily:
                    add_attribute_table(
                        db, "daily", result.daily(), "Daily flow and baseflow by gauge"
                    )
                if style is not None:
                    name, title, qml = style
                    write_layer_style(db, "catchments", name, f"Choropleth: {title}", qml)
                if provenance is not None:
                    write_provenance(db, provenance)
        finally:
            db.close()
    return Path(path)


def save_figure(figure, path, dpi=150, footer=None):
    """Save a matplotlib figure as PNG, atomically; ``footer`` (the version and date of the
    run, :meth:`provenance.Provenance.footer`) is written small in its bottom right corner."""
    if footer:  # just under everything drawn, at its right edge
        from matplotlib.backends.backend_agg import FigureCanvasAgg

        canvas = figure.canvas
        if not hasattr(canvas, "get_renderer"):
            canvas = FigureCanvasAgg(figure)
        box = figure.get_tightbbox(canvas.get_renderer())
        width, height = figure.get_size_inches()
        figure.text(
            box.x1 / width, box.y0 / height - 0.004, footer,
            ha="right", va="top", fontsize=6.5, color="#666666",
        )  # fmt: skip
    with atomic_path(path) as temp:
        figure.savefig(temp, dpi=dpi, format="png", bbox_inches="tight")
    return Path(path)


def write_csv(frame, path):
    """Write a table as CSV, atomically."""
    with atomic_path(path) as temp:
        frame.to_csv(temp, index=False)
    return Path(path)


def _gpkg_type(series):
    if pd.api.types.is_bool_dtype(series):
        return "BOOLEAN"
    if pd.api.types.is_integer_dtype(series):
        return "INTEGER"
    if pd.api.types.is_float_dtype(series):
        return "DOUBLE"
    if pd.api.types.is_datetime64_any_dtype(series):
        if (series.dropna() == series.dropna().dt.normalize()).all():
            return "DATE"
        return "DATETIME"
    return "TEXT"


def _cells(series, kind):
    """A column's values as SQLite takes them (None for missing), converted column-wise."""
    if kind == "DATE":
        values = series.to_numpy(dtype="datetime64[ns]")
        return _with_none(_day_texts(values.astype("datetime64[D]")), np.isnat(values))
    if kind == "DATETIME":
        values = series.to_numpy(dtype="datetime64[ns]")
        # GeoPackage 1.2, Requirement 5: YYYY-MM-DDTHH:MM:SS.SSSZ (GDAL warns on any other).
        text = np.char.add(np.datetime_as_string(values.astype("datetime64[ms]")), "Z")
        return _with_none(text.tolist(), np.isnat(values))
    if kind == "BOOLEAN":
        return series.to_numpy(dtype=bool).astype(np.int64).tolist()
    if kind == "INTEGER":
        if series.hasnans:  # a nullable integer column with missing values
            return [None if pd.isna(v) else int(v) for v in series.to_numpy(dtype=object)]
        return series.to_numpy(dtype=np.int64).tolist()
    if kind == "DOUBLE":
        values = series.to_numpy(dtype=float)
        return _with_none(values.tolist(), ~np.isfinite(values))
    if isinstance(series.dtype, pd.StringDtype):  # text already (pandas 3 reads text so)
        return series.to_numpy(dtype=object, na_value=None).tolist()
    out = series.to_numpy(dtype=object)
    missing = pd.isna(out)
    text = np.array([str(v) for v in out], dtype=object) if len(out) else out
    text[missing] = None
    return text.tolist()


def _day_texts(days):
    """ISO texts (YYYY-MM-DD) of an array of days (datetime64[D]; NaT gives any text).

    Each distinct day of the span is written once and looked up: a run's dates repeat over a
    few decades of days, and writing each one anew was most of the cost of writing its tables.
    """
    numbers = days.view(np.int64)
    known = ~np.isnat(days)
    if not known.any():
        return [None] * days.size
    low, high = int(numbers[known].min()), int(numbers[known].max())
    if high - low > 4 * days.size + 1000:  # few days far apart: write each
        return np.datetime_as_string(days).tolist()
    first, calendar = _CALENDAR
    if not (first <= low and high < first + calendar.size):
        # One calendar serves every slice and date column of a run's tables: it grows to cover
        # the days asked for (a year either side), within a bound.
        last = first + calendar.size - 1
        if calendar.size and max(high, last) - min(low, first) < _CALENDAR_DAYS:
            low, high = min(low, first), max(high, last)
        low, high = low - 366, high + 366
        calendar = np.datetime_as_string(np.arange(low, high + 1).astype("datetime64[D]"))
        first, calendar = low, calendar.astype(object)  # each text made once, then referred to
        _CALENDAR[:] = first, calendar
    return calendar.take(numbers - first, mode="clip").tolist()  # NaT's text is replaced


#: The first day (as a number) and the texts of the calendar :func:`_day_texts` keeps, and the
#: most days it grows to (about 270 years).
_CALENDAR = [0, np.empty(0, dtype=object)]
_CALENDAR_DAYS = 100_000


def _with_none(cells, missing):
    """``cells`` (a list) with None where ``missing`` is True."""
    for i in np.flatnonzero(missing).tolist():
        cells[i] = None
    return cells


def _identifier(name) -> str:
    """A table or column name quoted for SQLite (a double quote inside is doubled)."""
    return '"' + str(name).replace('"', '""') + '"'


#: Rows converted and inserted at a time when a table is written into a GeoPackage.
ROWS_PER_INSERT = 20_000


# Our own writer for the tables, measured against a library (issue 17; ``python
# benchmarks/libraries.py``, 2-core machine, December 2026): the whole GeoPackage of 2,000 gauges
# x 30 years (1.76 million table rows) took 4.2-4.7 s with write_geopackage and 3.8-4.0 s with
# pyogrio.write_dataframe(use_arrow=True) (the same rows, columns, types and values read back;
# GeoPackage 1.2 either way); 500 gauges 0.82-0.93 s against 1.04-1.05 s. Kept, because QGIS's
# Python on Debian 12 has neither pyogrio nor pyarrow (Debian 12 packages neither), one writer
# keeps the command line's and QGIS's outputs identical, and GDAL files its own XML metadata in
# gpkg_metadata, not our JSON provenance document under our URI (the layer_styles and run
# tables it could write).
def add_attribute_table(db, name, frame, description=""):
    """Add a non-spatial table to an open GeoPackage (data type ``attributes``, GPKG 1.2+)."""
    kinds = {column: _gpkg_type(frame[column]) for column in frame.columns}
    _create_table(db, name, kinds)
    _insert_rows(db, name, frame, kinds)
    _register_attributes(db, name, description, len(frame))


def _create_table(db, name, kinds):
    """(Re)create table ``name`` with a GeoPackage feature id and columns of ``kinds``."""
    # Named in ``main``: an attached database (see TableSpill) may hold a table of that name.
    table = "main." + _identifier(name)
    columns_sql = ", ".join(f"{_identifier(c)} {k}" for c, k in kinds.items())
    db.execute(f"DROP TABLE IF EXISTS {table}")
    db.execute(
        f"CREATE TABLE {table} (fid INTEGER PRIMARY KEY AUTOINCREMENT NOT NULL{', ' if kinds else ''}{columns_sql})"
    )


def _insert_rows(db, name, frame, kinds):
    """Append ``frame``'s rows to table ``name`` (its columns converted as ``kinds`` say).

    Many rows go in one statement (``INSERT … VALUES (…), (…), …``): SQLite then runs a
    statement per hundred rows, not per row, which halves the time a large table takes.
    """
    if not len(frame):
        return
    table = "main." + _identifier(name)
    names = ", ".join(_identifier(c) for c in kinds)
    row = "(" + ", ".join("?" for _ in kinds) + ")"
    width = len(kinds)
    per = max(1, min(ROWS_PER_STATEMENT, _most_parameters(db) // max(width, 1)))

    def statement(rows):
        return f"INSERT INTO {table} ({names}) VALUES " + ", ".join([row] * rows)

    full = statement(per)
    # A slice of rows at a time: the cells exist as Python values only for one slice.
    for start in range(0, len(frame), ROWS_PER_INSERT):
        part = frame.iloc[start : start + ROWS_PER_INSERT]
        cells = list(
            itertools.chain.from_iterable(zip(*[_cells(part[c], kinds[c]) for c in kinds]))
        )
        whole = (len(part) // per) * per * width
        step = per * width
        db.executemany(full, (cells[i : i + step] for i in range(0, whole, step)))
        if whole < len(cells):
            db.execute(statement((len(cells) - whole) // width), cells[whole:])


#: Rows inserted by one SQL statement (fewer when SQLite takes fewer parameters).
ROWS_PER_STATEMENT = 100


def _most_parameters(db):
    """How many parameters one statement may have (999, SQLite's old default, when Python
    cannot ask)."""
    try:
        return int(db.getlimit(sqlite3.SQLITE_LIMIT_VARIABLE_NUMBER))
    except AttributeError:  # Python before 3.11
        return 999


def _register_attributes(db, name, description, rows):
    """List table ``name`` among the GeoPackage's contents, as attributes of ``rows`` rows."""
    now = _dt.datetime.now(_dt.timezone.utc).strftime("%Y-%m-%dT%H:%M:%S.000Z")
    db.execute("DELETE FROM gpkg_contents WHERE table_name = ?", (name,))
    db.execute(
        "INSERT INTO gpkg_contents (table_name, data_type, identifier, description, last_change) VALUES (?, 'attributes', ?, ?, ?)",
        (name, name, description, now),
    )
    has_ogr = db.execute("SELECT 1 FROM sqlite_master WHERE name = 'gpkg_ogr_contents'").fetchone()
    if has_ogr:
        db.execute("DELETE FROM gpkg_ogr_contents WHERE table_name = ?", (name,))
        db.execute(
            "INSERT INTO gpkg_ogr_contents (table_name, feature_count) VALUES (?, ?)",
            (name, int(rows)),
        )


class TableSpill:
    """Result tables kept on disk while a large run goes on, then copied into the GeoPackage.

    A run that reads its discharge table a gauge group at a time hands each group's rows
    here (:meth:`add`) as soon as the group is done, so the result tables never pile up in
    memory. They wait in a temporary SQLite file, already converted as the GeoPackage takes
    them; :func:`write_geopackage` copies them across inside SQLite (:meth:`copy_into`), in
    the order they came. :meth:`close` removes the file (also after a failure).
    """

    def __init__(self):
        self.folder = Path(temporary_folder("tables"))
        self.path = self.folder / "tables.sqlite"
        self.db = sqlite3.connect(self.path)
        self.kinds = {}
        self.rows = {}

    def add(self, name, frame):
        """Append ``frame``'s rows to table ``name`` (created by the first rows it gets)."""
        if not len(frame):
            return
        try:
            if name not in self.kinds:
                self.kinds[name] = {column: _gpkg_type(frame[column]) for column in frame.columns}
                self.rows[name] = 0
                _create_table(self.db, name, self.kinds[name])
            _insert_rows(self.db, name, frame, self.kinds[name])
            self.db.commit()
        except (sqlite3.Error, OSError) as exc:
            full = disk_full(
                exc, self.folder, "keeping the result tables on disk", written=[self.path]
            )
            if full is not None:
                raise full from None
            raise InputError(
                f"the result tables could not be kept on disk while the run goes on: {exc}",
                file=str(self.path),
            ) from None
        self.rows[name] += len(frame)

    def holds(self, name) -> bool:
        return name in self.kinds

    def copy_into(self, db, name, description):
        """Table ``name`` into the open GeoPackage ``db`` (which has this file attached as
        ``spill``), with the same columns and rows in the same order."""
        kinds = self.kinds[name]
        _create_table(db, name, kinds)
        columns = ", ".join(_identifier(c) for c in kinds)
        table = _identifier(name)
        db.execute(
            f"INSERT INTO main.{table} ({columns}) SELECT {columns} FROM spill.{table} ORDER BY fid"
        )
        _register_attributes(db, name, description, self.rows[name])

    def batches(self, name, rows=50_000):
        """Table ``name``'s rows in their order, a list of tuples at a time (cells as the
        GeoPackage stores them: dates as ISO text, booleans as 0 and 1)."""
        columns = ", ".join(_identifier(c) for c in self.kinds[name])
        cursor = self.db.execute(f"SELECT {columns} FROM {_identifier(name)} ORDER BY fid")
        while True:
            chunk = cursor.fetchmany(rows)
            if not chunk:
                return
            yield chunk

    def close(self):
        self.db.close()
        for leftover in self.folder.glob("*"):
            leftover.unlink()
        self.folder.rmdir()


def read_attribute_table(path, name):
    """Read a non-spatial table written by :func:`add_attribute_table` (for tests and reports)."""
    with sqlite3.connect(f"file:{Path(path)}?mode=ro", uri=True) as db:
        frame = pd.read_sql_query(f"SELECT * FROM {_identifier(name)}", db)
    return frame.drop(columns="fid")
