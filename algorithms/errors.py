"""The one exception type for problems with the user's input."""

from __future__ import annotations


class InputError(ValueError):
    """A problem with the input that the user can fix: a file, a field, a gauge, a value.

    The message is short and names what is wrong and where. The optional attributes say where
    the problem lies, so the CLI and QGIS can print the same text.

    Attributes
    ----------
    message : str
        What is wrong, in a sentence.
    file, field, gauge, row : optional
        Where it is.
    """

    def __init__(self, message, *, file=None, field=None, gauge=None, row=None):
        self.message = str(message)
        self.file = file
        self.field = field
        self.gauge = gauge
        self.row = row
        super().__init__(self.__str__())

    def __str__(self):
        where = []
        if self.file is not None:
            where.append(f"file {self.file}")
        if self.field is not None:
            where.append(f"field {self.field!r}")
        if self.gauge is not None:
            where.append(f"gauge {self.gauge!r}")
        if self.row is not None:
            where.append(f"row {self.row}")
        return f"{self.message} ({', '.join(where)})" if where else self.message


class Cancelled(Exception):
    """Raised inside the pipeline when the caller asked to stop (the QGIS cancel button)."""
