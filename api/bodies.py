"""The service's own bodies: what only the HTTP API answers (the results it shares with the
library and the CLI are in :mod:`align.schema`)."""

from __future__ import annotations

from typing import Literal

from pydantic import ConfigDict, Field, create_model

from align.schema import AgeRef, LagResult, Model, Pair, RecordInfo, SurveyResult, XcorrResult


class Health(Model):
    """``GET /health``."""

    status: Literal["ok"]
    version: str


class RecordEntry(Model):
    """A stored record in the catalogue."""

    id: str
    name: str
    archive: str | None = None
    site: str | None = None
    timescale: str | None = None
    timescale_kind: str | None = None
    age_reference: AgeRef | None = None
    n_samples: int
    variables: list[str]
    depth_range: Pair | None = None
    age_range: Pair | None = None
    checksum: str
    created: str


class RecordList(Model):
    """``GET /records``."""

    records: list[RecordEntry]


class StoredRecord(Model):
    """``POST /records`` and ``GET /records/{id}``: the catalogue entry and what it holds."""

    entry: RecordEntry
    info: RecordInfo


class StoredTies(Model):
    """``POST /ties``."""

    id: str
    labels: list[str]
    ref_kind: Literal["depth", "age"]
    checksum: str


class StoredTable(Model):
    """``POST /tables``: an event table for surveys (name it by id in ``table.path``)."""

    id: str
    columns: list[str]
    rows: int
    checksum: str


class Problem(Model):
    """An RFC 9457 problem-details body (``application/problem+json``)."""

    model_config = ConfigDict(extra="allow")

    type: str
    title: str
    status: int
    detail: str
    instance: str | None = None
    pointer: str | None = Field(None, description="JSON pointer to the offending field")


class ResultLinks(Model):
    """Where a stored result can be read again."""

    result: str = Field(description="the stored result as JSON (also the Location header)")
    report: str | None = Field(None, description="the report as one HTML page")


def stored(result):
    """A result class with the id and links under which the service stored it: the library's
    ``to_dict()`` plus ``id`` and ``links``."""
    return create_model(f"Stored{result.__name__}", __base__=result,
                        __doc__=f"{result.__doc__ or result.__name__} As stored by the service.",
                        id=(str, Field(description="the stored result's id (its SHA-256)")),
                        links=(ResultLinks, ...))


StoredLagResult = stored(LagResult)
StoredSurveyResult = stored(SurveyResult)
StoredXcorrResult = stored(XcorrResult)
#: The library's result classes behind the stored ones (documented in OpenAPI too).
STORED_OF = {StoredLagResult: LagResult, StoredSurveyResult: SurveyResult,
             StoredXcorrResult: XcorrResult}
