"""corealign: date an abrupt event in one archive against a climate transition in another.

The public API is importable from here; see ``README.md`` for a tour and ``DEVELOPERS.md`` for
the architecture. Importing :mod:`align` is cheap: each public name loads its module (and that
module's dependencies) the first time it is used.
"""

import sys as _sys
import types as _types

from align.errors import InputError

#: Public name -> the module that defines it.
_PUBLIC = {
    "combined_age_draws": "align.synchrony",
    "convert_age": "align.ages",
    "cross_correlate": "align.xcorr",
    "detect_event": "align.markers.event",
    "detect_onset": "align.markers.onset",
    "estimate_lag": "align.lag",
    "open_record": "align.io",
    "read_request": "align.requests",
    "read_sites": "align.sites",
    "read_survey": "align.requests",
    "record_frame": "align.io",
    "read_ties": "align.ties",
    "resample": "align.resample",
    "save_record": "align.io",
    "survey": "align.survey",
    "test_synchrony": "align.synchrony",
    "transfer": "align.ties",
    "write_report": "align.report",
}

__all__ = ["InputError", *sorted(_PUBLIC)]


def _public(name):
    from importlib import import_module

    return getattr(import_module(_PUBLIC[name]), name)


class _Package(_types.ModuleType):
    """The package's module type: ``align.survey`` and ``align.resample`` are the functions,
    even after their modules (of the same names) are imported, which would otherwise replace
    them with the modules (the modules stay in ``sys.modules``)."""


for _name in ("resample", "survey"):
    setattr(_Package, _name, property(lambda self, _n=_name: _public(_n),
                                      lambda self, value: None))
_sys.modules[__name__].__class__ = _Package


def __getattr__(name):
    if name in _PUBLIC:
        value = _public(name)
        globals()[name] = value
        return value
    if name == "__version__":
        from align.provenance import version

        return version()
    raise AttributeError(f"module 'align' has no attribute {name!r}")


def __dir__():
    return sorted({*globals(), *__all__, "__version__"})
