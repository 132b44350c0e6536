"""Writing outputs safely: checks of an output path before the work, temporary names that say
whose they are (and the removal of a killed run's leftovers), the atomic move into place, and
"disk full" in words. A failed or cancelled run leaves no partial output and touches no input.
"""

from __future__ import annotations

import errno
import functools
import os
import re
import tempfile
from contextlib import contextmanager
from pathlib import Path

from .errors import InputError, describe, one_line


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


#
# Every temporary file or folder of a run carries ``~ra-<where>-<pid>-`` in its name: ``where``
# stands for this machine, its boot and its process-id namespace, ``pid`` for the process. A
# process killed outright (SIGKILL, the out-of-memory killer) cannot clean up; the next run
# removes what such a process left, and only that: a name of ours, made here since the last
# boot, owned by the user, by a process that no longer exists (:func:`remove_dead_leftovers`).


_OWNER_TAG = re.compile(r"~ra-(?P<where>[0-9a-f]{8})-(?P<pid>[0-9]+)-")


#: Hidden files beside an output (with SQLite's journal files, and the file of the second
#: process that writes some of a GeoPackage's tables, ``geopackage._TableHelper``).
_BESIDE = re.compile(
    r"^\..*\.~ra-[0-9a-f]{8}-[0-9]+-[a-z0-9_]+\.[A-Za-z0-9]+(-tables|-journal|-wal|-shm)?$"
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
