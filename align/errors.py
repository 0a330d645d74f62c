"""Errors that describe bad input precisely enough to fix it.

Every problem a user can cause with a file, a column, a row or a request field is raised as
:class:`InputError` (a :class:`ValueError`), carrying *where* the problem is. The command line
turns it into a one-line message and exit code 2; the HTTP service into an RFC 9457 problem
response with a pointer to the field. Anything else that escapes is a bug (exit code 1, 500).
"""

from __future__ import annotations


class InputError(ValueError):
    """Bad input, located as exactly as possible.

    Parameters
    ----------
    message : str
        What is wrong, in one sentence, without the location.
    source : str, optional
        The file (path or record id) the problem was found in.
    field : str, optional
        The column, variable, attribute or request field.
    row : int, optional
        The 1-based data row (CSV) or 0-based sample index (NetCDF), as named by ``row_kind``.
    row_kind : str
        How to name ``row`` in the message: ``"row"`` for table rows, ``"sample"`` for samples.
    status : int
        The HTTP status this problem maps to: 422 (content fails validation) unless the input
        could not even be parsed (400) or is of an unsupported type (415).
    """

    def __init__(self, message, *, source=None, field=None, row=None, row_kind="row",
                 status=422):
        self.message = message
        self.source = None if source is None else str(source)
        self.field = field
        self.row = row
        self.row_kind = row_kind
        self.status = status
        super().__init__(self.__str__())

    def __reduce__(self):  # keep the location when pickled (worker processes)
        return (_rebuild, (type(self), self.message, self.source, self.field, self.row,
                           self.row_kind, self.status))

    def with_source(self, source):
        """A copy naming ``source`` as the file (e.g. an upload's name, not its temp path)."""
        return InputError(self.message, source=source, field=self.field, row=self.row,
                          row_kind=self.row_kind, status=self.status)

    def located(self, *, source=None, field=None):
        """Return a copy with the source or field filled in where it was not yet known."""
        return InputError(self.message, source=self.source or source, field=self.field or field,
                          row=self.row, row_kind=self.row_kind, status=self.status)

    def where(self):
        """The location as text: ``file, column 'x', row 12``."""
        parts = []
        if self.source:
            parts.append(self.source)
        if self.field:
            parts.append(f"'{self.field}'")
        if self.row is not None:
            parts.append(f"{self.row_kind} {self.row}")
        return ", ".join(parts)

    def __str__(self):
        where = self.where()
        return f"{where}: {self.message}" if where else self.message


class NotATableError(InputError):
    """The input could not be read as a table or a NetCDF file at all (HTTP 415)."""

    def __init__(self, message, *, source=None, **_):
        super().__init__(message, source=source, status=415)


def _rebuild(cls, message, source, field, row, row_kind, status):
    return cls(message, source=source, field=field, row=row, row_kind=row_kind, status=status)
