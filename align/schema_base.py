"""The building blocks of the schema: the base class, provenance, estimates and what every
marker has in common.

They live apart from :mod:`align.schema` so that each marker kind (:mod:`align.markers`) can
build on them and the schema can then collect the kinds; :mod:`align.schema` re-exports every
name here.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Annotated, Any, ClassVar

import numpy as np
from pydantic import BaseModel, ConfigDict, Field, PrivateAttr

from align.choices import RecordReference, Transform

Pair = Annotated[list[float], Field(min_length=2, max_length=2)]
AgeRef = RecordReference


class Model(BaseModel):
    """Base of every schema class: strict about unknown fields, JSON-ready."""

    model_config = ConfigDict(extra="forbid")
    #: Fields left out of a table row by :meth:`to_dataframe` (whole results of their own).
    table_exclude: ClassVar[frozenset[str]] = frozenset()

    def to_dict(self):
        """The JSON-ready dictionary (the shape of ``--json`` and of the API)."""
        return self.model_dump(mode="json")

    def to_dataframe(self, table=None):
        """One of the result's tables as a :class:`pandas.DataFrame`, a row per item.

        Parameters
        ----------
        table : str, optional
            The name of a list field (``"budget"``, ``"what_if"``, ``"pairs"``, ...); default
            the first list of objects the result holds. Nested fields are flattened
            (``lag.median``).
        """
        import pandas as pd

        tables = [name for name, value in self if isinstance(value, list) and value
                  and all(isinstance(v, BaseModel) for v in value)]
        name = table or (tables[0] if tables else None)
        if name not in tables:
            from align.errors import InputError

            raise InputError(f"no table {name!r} in this result (tables: "
                             f"{', '.join(tables) or 'none'})", field="table")
        return pd.json_normalize([row.model_dump(mode="json", exclude=row.table_exclude)
                                  for row in getattr(self, name)])


class InputRef(Model):
    """One input of a result: its role, where it came from, and its checksum."""

    role: str
    source: str
    sha256: str
    timescale: str = ""


class Provenance(Model):
    """What a result was made from: inputs, parameters, seed and version."""

    inputs: list[InputRef]
    parameters: dict[str, Any]
    seed: int | None = None
    version: str
    created: str


class Estimate(Model):
    """A quantity with its uncertainty: median, central 68 % and 95 % intervals, sd."""

    median: float
    ci68: Pair
    ci95: Pair
    sd: float


class Trace(Model):
    """The window's data and the fitted curves, enough to redraw a marker's figure."""

    age_top: list[float]
    age_bottom: list[float]
    value: list[float | None]
    curve_age: list[float] = []
    curve: list[float | None] = []
    band_low: list[float | None] = []
    band_high: list[float | None] = []
    threshold: list[float | None] = []


@dataclass(frozen=True)
class MarkerDraws:
    """A marker's age draws (yr, the marker's reference), kept in memory for the lag stage.

    Not serialised: a marker read back from JSON has none, and the lag stage then detects it
    again (or, for kinds whose summary suffices, rebuilds them).

    Attributes
    ----------
    age : numpy.ndarray
        Draws of the marker's age with every source of its own uncertainty.
    fit : numpy.ndarray or None
        Draws of the fit alone (before the within-sample position is added), where the kind
        separates the two.
    """

    age: np.ndarray
    fit: np.ndarray | None = None


class MarkerBase(Model):
    """What every marker says: where it was looked for, how, and at what resolution."""

    record: str
    variable: str
    window: Pair
    age_reference: AgeRef
    method: str
    references: list[str] = Field([], description="keys of the method's references "
                                                  "(align.references)")
    units: str | None = Field(None, description="CF units of the variable")
    reference_scale: str | None = Field(None, description="the scale a ratio is given against "
                                                          "(e.g. VSMOW), when the file says")
    sample_interval: float | None = Field(None, description="age interval (yr) of the sample "
                                                            "holding the marker")
    depth: float | None = None
    trace: Trace
    provenance: Provenance

    _draws: MarkerDraws | None = PrivateAttr(default=None)

    @property
    def draws(self):
        """The marker's :class:`MarkerDraws` (not serialised), or None when loaded from JSON."""
        return self._draws

    def with_draws(self, draws):
        """Attach ``draws`` (a :class:`MarkerDraws`) and return the marker."""
        self._draws = draws
        return self


class SpecCommon(Model):
    """What every marker spec names: the record, the variable and the window."""

    record: str = Field(description="a path (CLI, library; relative paths resolve beside the "
                                    "request file, then in the working folder) or a stored "
                                    "record's id (HTTP API)")
    variable: str
    window: Pair = Field(description="[young, old] ages to search, in the request's "
                                     "age_reference")
    mapping: dict[str, Any] | None = Field(None, description="how to read a CSV record "
                                                             "(open_record keywords)")
    transform: Transform | None = Field(
        None, description="transform of the variable before detection (log for dust, sea salt)")


class TemplateCommon(Model):
    """A marker spec without its window (a survey's event table supplies it)."""

    record: str
    variable: str
    mapping: dict[str, Any] | None = None
    transform: Transform | None = None


def validate_as(model, data, *, source=None):
    """``model.model_validate(data)`` with the first problem raised as an
    :class:`~align.errors.InputError` that names the offending field."""
    from pydantic import TypeAdapter, ValidationError

    from align.errors import InputError

    try:
        if isinstance(model, type) and issubclass(model, BaseModel):
            return model.model_validate(data)
        return TypeAdapter(model).validate_python(data)
    except ValidationError as exc:
        first = exc.errors()[0]
        where = ".".join(map(str, _without_tags(first["loc"], data))) or None
        raise InputError(first["msg"], source=source, field=where) from None


def _without_tags(loc, data):
    """``loc`` without the tags pydantic inserts for tagged unions (a marker's ``kind``), so
    that the field path is the one in the request."""
    out, here = [], data
    for step in loc:
        if isinstance(here, dict) and step not in here and here.get("kind") == step:
            continue
        out.append(step)
        try:
            here = here[step]
        except (KeyError, IndexError, TypeError):
            here = None
    return out


def json_schemas(models):
    """JSON Schemas of ``models`` with references into ``#/components/schemas`` (OpenAPI)."""
    from pydantic.json_schema import models_json_schema

    _, top = models_json_schema([(m, "serialization") for m in models],
                                ref_template="#/components/schemas/{model}")
    return top.get("$defs", {})
