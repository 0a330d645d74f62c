"""The registry of marker kinds.

Each kind is one module of this package (its options, result class, detection, parts of the
lag's Monte Carlo, assumptions, figure and text; see :class:`align.markers.base.MarkerKind`).
Adding a kind is writing that module and adding it to ``KINDS`` below: the schema (marker
specs, templates and results as tagged unions on ``kind``), the lag, the reports, the CLI and
the OpenAPI document all follow from this list.
"""

from __future__ import annotations

from typing import Annotated, Literal, Union

from pydantic import Field

from align.markers import event, onset, sites
from align.markers.base import MarkerKind, Part

#: Every marker kind, by its ``kind`` tag.
KINDS: dict[str, MarkerKind] = {k.name: k for k in (event.KIND, onset.KIND, sites.KIND)}

#: The kind tags, as a ``Literal``.
MarkerKindName = Literal[tuple(KINDS)]
#: The kinds found on a record (``corealign detect KIND``, ``POST /detect/{kind}``, sites).
RECORD_KINDS = {name: kind for name, kind in KINDS.items() if kind.on_record}
RecordKindName = Literal[tuple(RECORD_KINDS)]


def _tagged(classes):
    return Annotated[Union[tuple(classes)], Field(discriminator="kind")]  # noqa: UP007


#: A marker to find (lag requests, survey pairs): one spec class per kind.
MarkerSpec = _tagged(k.spec for k in KINDS.values())
#: A marker without its window (survey templates).
MarkerTemplate = _tagged(k.template for k in KINDS.values())
#: A found marker (results).
Marker = _tagged(k.result for k in KINDS.values())


def kind_of(name):
    """The :class:`MarkerKind` called ``name``."""
    if name not in KINDS:
        from align.errors import InputError

        raise InputError(f"unknown marker kind {name!r}; use one of {', '.join(KINDS)}",
                         field="kind")
    return KINDS[name]


__all__ = ["KINDS", "RECORD_KINDS", "Marker", "MarkerKind", "MarkerKindName", "MarkerSpec",
           "MarkerTemplate", "RecordKindName",
           "Part", "kind_of"]
