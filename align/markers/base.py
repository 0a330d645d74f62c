"""What a marker kind provides, and the pieces every kind shares.

A kind is one module in :mod:`align.markers` holding its options, its result class, its
detection, its parts of the lag's Monte Carlo, its assumptions, its figure and its text; the
registry (:mod:`align.markers`) lists the kinds once.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from pydantic import create_model

from align.schema_base import SpecCommon, TemplateCommon


@dataclass
class Part:
    """One source of lag uncertainty: its draws (yr, with the sign they add to the lag).

    ``component`` is a sentence for people; ``kind`` and ``owner`` are what code uses.
    """

    component: str
    kind: str
    owner: str | None
    draws: np.ndarray


class MarkerKind:
    """A marker kind. Subclasses set the class attributes and implement the methods.

    Attributes
    ----------
    name : str
        The ``kind`` tag in requests and results.
    summary : str
        One line for ``--help`` and the OpenAPI document.
    options : type
        A :class:`~align.schema_base.Model` with a ``kind`` literal and the kind's options,
        each with its real default (from :mod:`align.choices`).
    result : type
        The result class (a :class:`~align.schema_base.MarkerBase`).
    """

    name: str
    summary: str
    options: type
    result: type
    #: Whether a window must be given (a kind that can search a whole record sets False).
    window_required = True
    #: Whether the marker is found on a record (a kind that combines other dates sets False:
    #: it has no record, variable or window, and no ``corealign detect`` command).
    on_record = True

    def __init__(self):
        doc = f"A{'n' if self.name[0] in 'aeiou' else ''} {self.name} marker: {self.summary}"
        spec_base = (SpecCommon,) if self.on_record else ()
        template_base = (TemplateCommon,) if self.on_record else ()
        self.spec = create_model(f"{self.name.title()}Spec",
                                 __base__=(self.options, *spec_base), __doc__=doc)
        self.template = create_model(f"{self.name.title()}Template",
                                     __base__=(self.options, *template_base),
                                     __doc__=doc + " (window from the event table)")

    # detection ---------------------------------------------------------------------------

    def detect(self, record, variable, window, options, *, seed, age_reference):
        """The marker in ``record[variable]`` within ``window`` (a result with draws)."""
        raise NotImplementedError

    def usable(self, marker, label):
        """Raise :class:`~align.errors.InputError` when ``marker`` cannot enter a lag."""

    def inputs(self, marker, label):
        """Provenance inputs of a marker that is not on a record (its own files)."""
        return [{**i.model_dump(), "role": f"{label}: {i.role}"}
                for i in marker.provenance.inputs]

    # the lag's Monte Carlo ---------------------------------------------------------------

    #: What gets a marker's draws back when it was read from JSON (which keeps none).
    redo = "detect it again"

    def draws_of(self, marker):
        """The marker's :class:`~align.schema_base.MarkerDraws`, or a clear refusal."""
        if marker.draws is None:
            from align.errors import InputError

            raise InputError(f"this {self.name} marker carries no draws (read back from JSON); "
                             f"{self.redo} to use it in a lag", field="draws")
        return marker.draws

    def center(self, marker):
        """The marker's central age (yr): where the timescale errors are evaluated."""
        raise NotImplementedError

    def parts(self, marker, label, sign, n, rng):
        """The marker's own uncertainty as :class:`Part` objects of ``n`` draws each."""
        raise NotImplementedError

    def assumptions(self, marker, label):
        """Sentences for the report's assumptions."""
        return []

    # rendering ---------------------------------------------------------------------------

    def draw(self, ax, marker, colour):
        """Draw how the marker was picked into a matplotlib ``Axes``; return its title."""
        raise NotImplementedError

    def text(self, marker):
        """Lines of plain text for the terminal."""
        raise NotImplementedError

    def part_name(self, marker, label):
        """The start of the marker's budget rows: ``a: event in RECORD VARIABLE``."""
        return f"{label}: {self.name} in {marker.record} {marker.variable}"

    def describe(self, marker):
        """The marker in a few words (verdicts, budget rows)."""
        return f"the {self.name} in {marker.record} {marker.variable}"
