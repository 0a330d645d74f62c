"""Library errors in the service's words: pointers into the request, record ids, field names.

The library locates a problem by file path and by its own field names (``variables``,
``max_lag``, a variable's name); the service answers with a JSON pointer into the request
body (``/a/variable``), names stored objects by id (never by a path on the server) and speaks
the request's field names (never command-line flags).
"""

from __future__ import annotations

import re
from dataclasses import dataclass, field

from align.errors import InputError
from api.problems import Problem

_FLAG_NOTE = re.compile(r" ?\(--[a-z][a-z-]*\)")
_FLAG = re.compile(r"(?<![\w-])--([a-z][a-z-]*)")
_STORED = re.compile(r"(?:[^\s'\",;:()]*/)?objects/(records|ties|grids|results)/([0-9a-f]{64})"
                     r"\.\w+")
_SINGULAR = {"records": "record", "ties": "tie table", "grids": "grid", "results": "result"}


@dataclass
class Where:
    """How a route's request maps to what the library sees.

    Attributes
    ----------
    sides : dict of str to (str, str)
        Stored file path -> (pointer prefix such as ``/a``, the variable named there).
    fields : dict of str to str
        Library field -> pointer (defaults: ``/<field>`` with dots as slashes).
    default : str, optional
        The pointer when nothing else locates the problem (an upload's ``/file``).
    """

    sides: dict = field(default_factory=dict)
    fields: dict = field(default_factory=dict)
    default: str | None = None

    def pointer(self, exc):
        name = exc.field
        if name and ("." in name or "/" in name):
            return "/" + name.replace(".", "/")
        if name in self.fields:
            return self.fields[name]
        side = self.sides.get(exc.source)
        if side is not None:
            prefix, variable = side
            if name and name == variable or name in ("variable", "transform"):
                return f"{prefix}/{'transform' if name == 'transform' else 'variable'}"
            if name in ("window",):
                return f"{prefix}/window"
            return f"{prefix}/record"
        if name and self.default is None:
            return "/" + name
        return self.default


def words(text, root=None):
    """``text`` without server paths (stored objects named by id) or command-line flags."""
    text = _STORED.sub(lambda m: f"{_SINGULAR[m[1]]} {m[2]}", text)
    if root:
        text = text.replace(str(root), "<store>")
    text = _FLAG_NOTE.sub("", text)
    return _FLAG.sub(lambda m: m[1].replace("-", "_"), text)


def problem(exc: InputError, where: Where, root=None):
    """A :class:`~api.problems.Problem` for a library error raised by a route's work."""
    status = exc.status if exc.status in (400, 404, 413, 415, 422) else 422
    if status == 404:  # a path the library could not find is the service's, not the client's
        status = 422
    return Problem(status, words(str(exc), root), pointer=where.pointer(exc))
