"""Sites: the combined age of one horizon dated at many sites, as a lag marker.

A ``sites`` marker is not found on a record: it is the common age of a horizon (an ash layer,
a spike) dated at several sites, from :func:`align.synchrony.combined_age_draws`, so that a lag
can answer "the event dated at N sites vs the onset in this ice core". Its draws carry every
site's own uncertainty and the shared chronologies' correlation; the lag budget lists the
combination as one source. It is refused when the sites are not consistent with one common age,
unless ``allow_inconsistent`` is set, which the report then states.
"""

from __future__ import annotations

from typing import Any, Literal

import numpy as np
from pydantic import Field

from align.choices import DEFAULT_LAG_DRAWS, DEFAULT_OUTLIER_PRIOR, MAX_LAG_DRAWS, MIN_LAG_DRAWS
from align.markers.base import MarkerKind, Part
from align.schema_base import Estimate, MarkerBase, MarkerDraws, Model


class SitesOptions(Model):
    """The options of a sites marker."""

    kind: Literal["sites"] = "sites"
    sites: list[dict[str, Any]] = Field(
        min_length=2, description="the sites, as in a synchrony request (a site file named "
                                  "here is read by align.read_request)")
    allow_inconsistent: bool = Field(False, description="use the combined age even when the "
                                     "sites are not consistent with one common age")
    outlier_prior: float = Field(DEFAULT_OUTLIER_PRIOR, gt=0, lt=1,
                                 description="prior probability that a site is shifted")
    draws: int = Field(DEFAULT_LAG_DRAWS, ge=MIN_LAG_DRAWS, le=MAX_LAG_DRAWS,
                       description="Monte Carlo draws of the sites' dates")


class SiteAge(Model):
    """One site's age as the sites marker shows it."""

    label: str
    age: Estimate
    independent: bool


class SitesResult(MarkerBase):
    """The combined age of a horizon dated at several sites."""

    kind: Literal["sites"] = "sites"
    combined: Estimate
    consistent: bool
    p_value: float
    p_value_text: str = Field(description="the p-value in words (see ConsistencyTest)")
    n_sites: int = Field(description="independent sites combined")
    allow_inconsistent: bool
    synchrony_verdict: str
    sites: list[SiteAge]

    @property
    def age(self):
        """The combined age estimate."""
        return self.combined


class Sites(MarkerKind):
    """The sites kind (see the module)."""

    name = "sites"
    summary = "the combined age of a horizon dated at many sites"
    options = SitesOptions
    result = SitesResult
    window_required = False
    on_record = False
    redo = "combine the sites again"

    def detect(self, record, variable, window, options, *, seed, age_reference):
        from align.schema_base import Trace
        from align.synchrony import combined_age_draws

        draws, found = combined_age_draws(
            {"sites": options["sites"], "age_reference": age_reference or "b2k",
             "seed": seed, "outlier_prior": options.get("outlier_prior", DEFAULT_OUTLIER_PRIOR),
             "draws": options.get("draws", DEFAULT_LAG_DRAWS)},
            allow_inconsistent=options.get("allow_inconsistent", False))
        combined = found.combined.age
        used = [s for s in found.sites if s.independent]
        lo, hi = (float(v) for v in np.percentile(draws, [0.1, 99.9]))
        marker = SitesResult(
            record=f"{len(used)} sites", variable="combined age", window=[lo, hi],
            age_reference=found.age_reference,
            method=("combined age of independent sites by generalised least squares with the "
                    "full covariance (shared chronologies), from joint Monte Carlo draws; "
                    f"consistency test {found.test.p_value_text}"),
            references=found.references, trace=Trace(age_top=[], age_bottom=[], value=[]),
            provenance=found.provenance, combined=combined, consistent=found.test.consistent,
            p_value=found.test.p_value, p_value_text=found.test.p_value_text,
            n_sites=len(used),
            allow_inconsistent=bool(options.get("allow_inconsistent", False)),
            synchrony_verdict=found.verdict,
            sites=[SiteAge(label=s.label, age=s.age, independent=s.independent)
                   for s in found.sites])
        return marker.with_draws(MarkerDraws(age=np.asarray(draws, dtype=float)))

    def center(self, marker):
        return float(np.median(self.draws_of(marker).age))

    def parts(self, marker, label, sign, n, rng):
        draws = self.draws_of(marker).age
        pick = draws[rng.integers(0, draws.size, n)]
        return [Part(f"{label}: combined age of {marker.record} (site dates and chronologies)",
                     "combination", label, sign * (pick - np.median(draws)))]

    def assumptions(self, marker, label):
        out = [f"Marker {label}: the combined age of {marker.record}; {marker.synchrony_verdict}"]
        if not marker.consistent:
            out.append(f"Caution, marker {label}: the sites' dates are not consistent with one "
                       f"common age ({marker.p_value_text}); the combined age was used "
                       "because allow_inconsistent was set, and is not supported by the data.")
        return out

    def draw(self, ax, marker, colour):
        from align.figures import COLOURS, interval_span

        for k, site in enumerate(marker.sites):
            shade = colour if site.independent else COLOURS["band"]
            ax.plot(site.age.ci95, [k, k], color=shade, lw=1.5)
            ax.plot(site.age.median, k, "o", color=shade, ms=4)
        ax.set_yticks(range(len(marker.sites)),
                      [s.label + ("" if s.independent else " (not counted)")
                       for s in marker.sites], fontsize=7)
        ax.set_ylim(len(marker.sites) - 0.5, -0.5)
        ax.set_ylabel("site")
        interval_span(ax, marker.combined, colour, "combined age")
        return (f"Combined age of {marker.record}"
                + ("" if marker.consistent else " (NOT consistent: used as allowed)"))

    def text(self, marker):
        from align.text import estimate_line

        return [f"combined    {estimate_line(marker.combined, marker.age_reference)}",
                marker.synchrony_verdict]

    def describe(self, marker):
        return f"the horizon dated at {marker.record}"


KIND = Sites()
