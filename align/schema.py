"""The one schema: requests and results shared by the library, the CLI and the HTTP API.

Every result class here is what a library function returns, what ``corealign ... --json``
prints (``to_dict()``), what the service answers, and what ``/openapi.json`` documents
(generated from these classes by :func:`json_schemas`). Nothing else defines these shapes.

Conventions: ages are in years in the named ``age_reference``; intervals are
``[lower, upper]`` in numbers (for ages: ``[young, old]``); lags are
``age(a) - age(b)``, positive when ``a`` happened first.
"""

from __future__ import annotations

from typing import Annotated, Literal

from pydantic import BaseModel, ConfigDict, Field

Pair = Annotated[list[float], Field(min_length=2, max_length=2)]
AgeRef = Literal["b2k", "BP"]


class Model(BaseModel):
    """Base of every schema class: strict about unknown fields, JSON-ready."""

    model_config = ConfigDict(extra="forbid")

    def to_dict(self):
        """The JSON-ready dictionary (the shape of ``--json`` and of the API)."""
        return self.model_dump(mode="json")


# --------------------------------------------------------------------------------------------
# records


class Spread(Model):
    """Median, minimum and maximum of a set of sample intervals."""

    median: float
    min: float
    max: float


class CoordinateInfo(Model):
    """One coordinate of a record: range, units and sample-interval statistics."""

    units: str
    range: Pair
    interval: Spread
    bounds_derived: bool


class VariableInfo(Model):
    """One proxy variable: units, long name and how many values are missing."""

    name: str
    units: str | None = None
    long_name: str | None = None
    n_missing: int
    n_valid: int


class RecordInfo(Model):
    """What a record holds (``corealign info``, ``GET /records/{id}``)."""

    name: str
    source: str
    checksum: str
    archive: str | None = None
    site: str | None = None
    core: str | None = None
    timescale: str | None = None
    timescale_kind: str | None = None
    age_reference: AgeRef | None = None
    n_samples: int
    depth: CoordinateInfo | None = None
    age: CoordinateInfo | None = None
    uncertainty: Literal["mce", "sd", "ensemble", "none"]
    ensemble_members: int = 0
    variables: list[VariableInfo]
    history: list[str] = []


class AgeConversion(Model):
    """One age conversion (``corealign age --json``)."""

    value: float
    from_: str = Field(alias="from")
    to: str
    result: float

    model_config = ConfigDict(extra="forbid", populate_by_name=True)

    def to_dict(self):
        return self.model_dump(mode="json", by_alias=True)


def json_schemas(models):
    """JSON Schemas of ``models`` with references into ``#/components/schemas`` (OpenAPI)."""
    from pydantic.json_schema import models_json_schema

    _, top = models_json_schema([(m, "serialization") for m in models],
                                ref_template="#/components/schemas/{model}")
    return top.get("$defs", {})
