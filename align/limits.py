"""Resource limits: every size a request implies, checked before the work starts.

A request names a few numbers (a grid step, a lag range, a count of draws); the work they imply
(cells, lag steps, draws times samples, ...) can be many orders of magnitude larger. Each such
size is compared here with a documented limit before anything is allocated, and refused as
:class:`LimitError` (an :class:`~align.errors.InputError`: exit code 2 on the command line,
413 or 422 from the service) naming the field, the size and the limit.

The library's limits are :data:`DEFAULTS`; people who know what their machine can take raise
them for a block of code::

    from align.limits import use_limits

    with use_limits(cells=100_000_000):
        grid = resample(record, 1e-3)

``corealign --limit cells=1e8 resample ...`` does the same on the command line; the service
has its own, tighter limits (``LIMITS`` in :data:`api.DEFAULTS`). The limits hold per thread
and per task (:mod:`contextvars`).
"""

from __future__ import annotations

import contextlib
import contextvars
from dataclasses import dataclass, fields, replace

from align.errors import InputError


@dataclass(frozen=True)
class Limits:
    """The limits (counts of values, or bytes where named so).

    Attributes
    ----------
    cells : int
        Cells of a resampling grid (also the common grid of a cross-correlation).
    lag_steps : int
        Lags tried by a cross-correlation (``2 max_lag / step + 1``).
    lags_x_length : int
        Lags times grid cells: the lagged products of a cross-correlation's bootstrap.
    surrogates_x_length : int
        Surrogate series (or bootstrap replicates) times grid cells of a cross-correlation.
    draws_x_samples : int
        Monte Carlo draws times samples in a marker's window (onset bootstrap, posterior).
    variable_bytes : int
        Bytes of one NetCDF variable as its header declares it (uncompressed), checked before
        it is read.
    columns : int
        Columns of a table (text, workbook or generic NetCDF), checked on the header line.
    name_length : int
        Characters of a column or variable name.
    """

    cells: int = 20_000_000
    lag_steps: int = 100_001
    lags_x_length: int = 200_000_000
    surrogates_x_length: int = 200_000_000
    draws_x_samples: int = 200_000_000
    variable_bytes: int = 2 * 1024**3
    columns: int = 2_000
    name_length: int = 256


#: The library's limits.
DEFAULTS = Limits()
#: What each limit counts, for messages.
WHAT = {"cells": "grid cells", "lag_steps": "lag steps", "lags_x_length": "lags x grid cells",
        "surrogates_x_length": "surrogates x grid cells",
        "draws_x_samples": "draws x samples in the window",
        "variable_bytes": "bytes (uncompressed)", "columns": "columns",
        "name_length": "characters"}
#: Limits on what a file holds (HTTP 413); the others are on what a request asks (422).
_CONTENT = ("variable_bytes", "columns")
_ACTIVE = contextvars.ContextVar("corealign_limits", default=DEFAULTS)


class LimitError(InputError):
    """A size over its limit; ``limit`` names the limit (a :class:`Limits` field)."""

    def __init__(self, message, *, limit=None, **where):
        where.setdefault("status", 413 if limit in _CONTENT else 422)
        super().__init__(message, **where)
        self.limit = limit

    def __reduce__(self):  # keep the limit's name across worker processes
        return (_rebuild, (self.message, self.limit, self.source, self.field, self.row,
                           self.row_kind, self.status))

    def with_source(self, source):
        return LimitError(self.message, limit=self.limit, source=source, field=self.field,
                          row=self.row, row_kind=self.row_kind, status=self.status)

    def located(self, *, source=None, field=None):
        return LimitError(self.message, limit=self.limit, source=self.source or source,
                          field=self.field or field, row=self.row, row_kind=self.row_kind,
                          status=self.status)


def _rebuild(message, limit, source, field, row, row_kind, status):
    return LimitError(message, limit=limit, source=source, field=field, row=row,
                      row_kind=row_kind, status=status)


def current():
    """The limits in force here (:data:`DEFAULTS` unless raised by :func:`use_limits`)."""
    return _ACTIVE.get()


def names():
    """The names of the limits, in table order."""
    return [f.name for f in fields(Limits)]


def parse(changes, *, field="limit"):
    """``{name: value}`` checked and made integers (values may be text such as ``"1e8"``)."""
    out = {}
    for name, value in changes.items():
        if name not in names():
            raise InputError(f"no limit named {name!r} (limits: {', '.join(names())})",
                             field=field)
        try:
            number = float(value)
        except (TypeError, ValueError):
            number = float("nan")
        if not (number >= 1 and number < 2**62 and number == int(number)):
            raise InputError(f"the limit {name} must be a whole number >= 1 (got {value!r})",
                             field=field)
        out[name] = int(number)
    return out


@contextlib.contextmanager
def use_limits(**changes):
    """Raise (or lower) limits inside a ``with`` block.

    Parameters
    ----------
    **changes : int
        New values of :class:`Limits` fields, e.g. ``cells=100_000_000``.
    """
    token = _ACTIVE.set(replace(current(), **parse(changes)))
    try:
        yield current()
    finally:
        _ACTIVE.reset(token)


def check(name, amount, *, field, source=None, detail=""):
    """Refuse ``amount`` of what limit ``name`` counts when it is over the limit.

    Parameters
    ----------
    name : str
        A :class:`Limits` field.
    amount : float
        The size the request implies (may be huge or not finite: both are refused).
    field : str
        The request field that implies it (``step``, ``max_lag``, ``draws``, ...).
    source : str, optional
        The file or record concerned.
    detail : str, optional
        How the size follows from the request, for the message.

    Raises
    ------
    LimitError
    """
    ceiling = getattr(current(), name)
    if amount <= ceiling:  # False for NaN: refused below
        return
    size = f"{amount:,.0f}" if amount < 1e15 else f"{amount:.3g}"
    raise LimitError(f"means {size} {WHAT[name]}{detail}, over the limit of {ceiling:,} "
                     f"(limit {name!r})", limit=name, field=field, source=source)
