"""The one exception type for problems with the user's input, and how errors are put in words.

Every problem a user can fix (a file, a field, a gauge, a value) raises :class:`InputError`
with a short message that names what is wrong and where. The command line prints it on one
line and exits 2; the QGIS algorithms raise ``QgsProcessingException`` with the same text.
Anything else is a fault of ours: the command line says so in one line (``--debug`` shows the
trace), and one gauge that fails is flagged in ``quality`` while the run goes on.
"""

from __future__ import annotations

import re

#: The longest message, in characters, before it is shortened: an error fits on a line or two.
MESSAGE_LIMIT = 300
#: The longest piece of the user's data quoted in a message (a value, a field name).
QUOTE_LIMIT = 40

_CONTROL = re.compile(r"[\x00-\x1f\x7f-\x9f]+")


def one_line(text, limit: int = MESSAGE_LIMIT) -> str:
    """``text`` on one line: control characters and line breaks become spaces, runs of spaces
    one space, and text longer than ``limit`` is cut with an ellipsis."""
    flat = re.sub(r"\s+", " ", _CONTROL.sub(" ", str(text))).strip()
    if len(flat) > limit:
        flat = flat[: limit - 1].rstrip() + "…"
    return flat


def quoted(value, limit: int = QUOTE_LIMIT) -> str:
    """A piece of the user's data, quoted and shortened for a message: ``'2020-13-45'``."""
    text = one_line(value, limit)
    return repr(text)


def listed(names, limit: int = 12) -> str:
    """Names joined by commas, the first ``limit`` of them, with how many there are in all."""
    names = [one_line(n, QUOTE_LIMIT) for n in names]
    if not names:
        return "none"
    shown = ", ".join(names[:limit])
    if len(names) > limit:
        shown += f", … ({len(names)} in all)"
    return shown


def counted(number: int, word: str, words: str | None = None) -> str:
    """``'1 row'``, ``'3 rows'``: a count with its noun in the right number."""
    return f"{number:,} {word if number == 1 else (words or word + 's')}"


def describe(exc: BaseException) -> str:
    """An unexpected exception in one short line: its type and the first line of its text."""
    lines = str(exc).strip().splitlines()
    text = lines[0] if lines else ""
    name = type(exc).__name__
    return one_line(f"{name}: {text}" if text else name, 160)


class InputError(ValueError):
    """A problem with the input that the user can fix: a file, a field, a gauge, a value.

    The message is short and names what is wrong; the optional attributes say where the problem
    lies, and are added to the text in brackets, so the command line and QGIS print the same
    words. The text is always one line (line breaks from underlying libraries are folded, long
    texts cut).

    Parameters
    ----------
    message : str
        What is wrong, in a sentence, without a full stop.
    file, field, gauge, row : optional
        Where it is: a file path, a field name, a gauge id, a row of a table (counted from 1,
        after the header).

    Examples
    --------
    >>> str(InputError("the discharge table has no field 'flow'", file="q.csv"))
    "the discharge table has no field 'flow' (file q.csv)"
    """

    #: ``(what, field)`` when the error is a field missing from a layer or table (set by
    #: ``discharge.require_columns``): the shells add the option or parameter that names it.
    missing_field = None

    def __init__(self, message, *, file=None, field=None, gauge=None, row=None):
        self.message = one_line(message)
        self.file = file
        self.field = field
        self.gauge = gauge
        self.row = row
        super().__init__(self.__str__())

    def __str__(self):
        where = []
        if self.file is not None:
            where.append(f"file {one_line(self.file, 200)}")
        if self.field is not None:
            where.append(f"field {quoted(self.field)}")
        if self.gauge is not None:
            where.append(f"gauge {one_line(self.gauge, QUOTE_LIMIT)}")
        if self.row is not None:
            where.append(f"row {self.row}")
        return f"{self.message} ({', '.join(where)})" if where else self.message

    def extended(self, text) -> InputError:
        """This error with ``text`` added to its message (returns itself)."""
        self.message = one_line(self.message + text)
        self.args = (self.__str__(),)
        return self

    def located(self, *, file=None, field=None, gauge=None, row=None) -> InputError:
        """This error with the places it does not name yet filled in (returns itself).

        The command line uses it to add the file an error came from when the core, which
        works on tables, could not know it.
        """
        for name, value in (("file", file), ("field", field), ("gauge", gauge), ("row", row)):
            if value is not None and getattr(self, name) is None:
                setattr(self, name, value)
        self.args = (self.__str__(),)
        return self


class Cancelled(Exception):
    """Raised inside the pipeline when the caller asked to stop (the QGIS cancel button)."""
