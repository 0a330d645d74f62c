"""Figures of a lag or survey result (matplotlib), drawn from the result object alone.

Conventions kept in every figure: age increases to the LEFT, so forward time runs left to
right; axes name their units and the age reference; the palette (blue for record a, orange
for record b, purple for the lag, greys for bands) stays distinguishable with the common
colour-vision deficiencies. Everything drawn comes from the result's JSON, so a report can
be redrawn from ``report.json`` alone.

Figures are :class:`matplotlib.figure.Figure` objects made without pyplot, so drawing them never
touches the caller's backend or pyplot state (a notebook keeps its inline figures); each
function that draws one panel also accepts an ``ax`` to draw into.
"""

from __future__ import annotations

from contextlib import contextmanager

import numpy as np

from align.units import with_units

COLOURS = {"a": "#1f5fa6", "b": "#d9730d", "lag": "#6a3d9a", "ink": "#333333",
           "band": "#bdbdbd", "light": "#e6e6e6"}
#: One colour per kind of budget item (distinguishable with the common colour-vision
#: deficiencies; a key names them in every budget figure).
KIND_COLOURS = {"resolution": "#1f5fa6", "detection": "#d9730d", "timescale": "#6a3d9a",
                "tie": "#2a9d8f", "bridge": "#8c6d31", "combination": "#c2185b"}
STYLE = {"font.size": 9, "axes.spines.top": False, "axes.spines.right": False,
         "axes.titlesize": 10, "axes.titleweight": "bold", "svg.hashsalt": "corealign",
         "svg.fonttype": "path"}
AGE_NOTE = "age increases to the left; forward time runs left to right"


def _age_axis(ax, reference):
    ax.set_xlabel(f"age (yr {reference}) — {AGE_NOTE}")
    if not ax.xaxis_inverted():
        ax.invert_xaxis()


def _steps(ax, top, bottom, values, colour, label=None):
    """Samples drawn as a staircase over their age intervals; gaps and missing values break
    it (no line across them). A marker that is not on a record has none: nothing is drawn."""
    if not top:
        return
    edges, heights = [top[0]], []
    for k, (t, b, v) in enumerate(zip(top, bottom, values)):
        if k and t > edges[-1]:  # a gap between samples
            heights.append(np.nan)
            edges.append(t)
        heights.append(np.nan if v is None else v)
        edges.append(b)
    ax.stairs(heights, edges, color=colour, lw=1.2, label=label, baseline=None)


@contextmanager
def styled(figsize, **subplots):
    """A new :class:`~matplotlib.figure.Figure` (and its axes) in the house style."""
    import matplotlib
    from matplotlib.figure import Figure

    with matplotlib.rc_context(STYLE):
        fig = Figure(figsize=figsize)
        axes = fig.subplots(**subplots)
        yield fig, axes
        fig.tight_layout()


def interval_span(ax, estimate, colour, label):
    ax.axvspan(*estimate.ci95, color=colour, alpha=0.18, lw=0, label=f"{label} 95 %")
    ax.axvline(estimate.median, color=colour, lw=1.2, ls="--")


def overview_figure(result):
    """Both records on the common timescale: samples as steps over their intervals, each
    marker with its 95 % interval, and under each record with a timescale error its sd as a
    band (a record without one gets no empty panel)."""
    from align.markers import kind_of

    sides = (("a", result.figures.records[0], result.a),
             ("b", result.figures.records[1], result.b))
    bands = [any(sd > 0 for sd in excerpt.timescale_sd) for _, excerpt, _ in sides]
    ratios = [r for band in bands for r in ([3, 1] if band else [3])]
    with styled((8.5, 1.2 * sum(ratios) / 2 + 1.4), nrows=len(ratios), ncols=1, sharex=True,
                gridspec_kw={"height_ratios": ratios}) as (fig, axes):
        panels = iter(axes)
        for (side, excerpt, marker), band in zip(sides, bands):
            ax = next(panels)
            colour = COLOURS[side]
            if excerpt.age_top:
                _steps(ax, excerpt.age_top, excerpt.age_bottom, excerpt.value, colour)
                interval_span(ax, marker.age, colour, f"{marker.kind} {side}")
                ax.set_ylabel(with_units(excerpt.variable, excerpt.units,
                                         excerpt.reference_scale))
            else:  # a marker that is not on a record draws itself
                kind_of(marker.kind).draw(ax, marker, colour)
            what = (f"{marker.kind} in {excerpt.variable}" if excerpt.age_top
                    else excerpt.variable)
            ax.set_title(f"{excerpt.label}: {what}", loc="left")
            _legend_beside(ax)
            if band:
                sd_ax = next(panels)
                mids = 0.5 * (np.asarray(excerpt.age_top) + np.asarray(excerpt.age_bottom))
                sd_ax.fill_between(mids, 0, excerpt.timescale_sd, color=COLOURS["band"], lw=0,
                                   step="mid")
                sd_ax.set_ylabel("timescale\nsd (yr)", fontsize=7)
                sd_ax.set_ylim(bottom=0)
        _age_axis(axes[-1], result.age_reference)
        fig.suptitle("The two records on one timescale", x=0.01, ha="left", fontsize=11,
                     fontweight="bold")
    return fig


def _legend_beside(ax, fontsize=7):
    """A legend to the right of the axes, off the data."""
    ax.legend(loc="upper left", bbox_to_anchor=(1.01, 1.0), frameon=False, fontsize=fontsize)


def marker_figure(marker, side, ax=None):
    """How a marker was picked (each kind draws its own: :meth:`MarkerKind.draw`)."""
    from align.markers import kind_of

    def draw(ax):
        colour = COLOURS[side]
        trace = marker.trace
        _steps(ax, trace.age_top, trace.age_bottom, trace.value, colour, "samples")
        ax.set_ylabel(with_units(marker.variable, marker.units, marker.reference_scale))
        ax.set_title(kind_of(marker.kind).draw(ax, marker, colour), loc="left")
        _legend_beside(ax)
        _age_axis(ax, marker.age_reference)

    return on_axes(ax, (8.5, 3.0), draw)


def on_axes(ax, figsize, draw):
    """Run ``draw(ax)`` on the given matplotlib ``Axes``, or on a new figure of ``figsize``;
    return the figure."""
    if ax is not None:
        draw(ax)
        return ax.figure
    with styled(figsize) as (fig, new):
        draw(new)
    return fig


def lag_figure(result, ax=None):
    """The lag distribution with its median, 68 % and 95 % intervals and the zero line."""
    return on_axes(ax, (8.5, 3.0), lambda ax: _draw_lag(result, ax))


def _draw_lag(result, ax):
    hist = result.figures.lag_histogram
    edges = np.asarray(hist.edges)
    ax.stairs(hist.counts, edges, fill=True, color=COLOURS["lag"], alpha=0.35)
    ax.stairs(hist.counts, edges, color=COLOURS["lag"])
    ax.axvspan(*result.lag.ci95, color=COLOURS["light"], zorder=0, label="95 %")
    ax.axvspan(*result.lag.ci68, color=COLOURS["band"], alpha=0.5, zorder=0, label="68 %")
    ax.axvline(result.lag.median, color=COLOURS["lag"], lw=1.5,
               label=f"median {result.lag.median:.1f} yr")
    ax.axvline(0.0, color=COLOURS["ink"], lw=1, ls=":", label="no lag")
    ax.set_xlabel("lag = age(a) - age(b) (yr); positive: a happened first")
    ax.set_ylabel("Monte Carlo draws")
    ax.set_title("Lag distribution", loc="left")
    _legend_beside(ax)


def budget_figure(result):
    """The uncertainty budget (sd of each source, coloured by kind, with a key) and, below it,
    the 95 % width after each named improvement. Labels are wrapped, never cut."""
    items = sorted(result.budget, key=lambda b: b.share)
    rows = [("as it is", result.lag.ci95[1] - result.lag.ci95[0])] + [
        (w.change, w.width) for w in result.what_if]
    height = 0.42 * (len(items) + len(rows)) + 1.8
    with styled((8.5, height), nrows=2, ncols=1,
                gridspec_kw={"height_ratios": [len(items) + 1, len(rows) + 1]}) as (
            fig, (top, bottom)):
        top.barh(range(len(items)), [b.sd for b in items],
                 color=[KIND_COLOURS[b.kind] for b in items])
        top.set_yticks(range(len(items)), [_wrap(b.component) for b in items], fontsize=7)
        for k, b in enumerate(items):
            top.text(b.sd, k, f" {b.share:.0%}", va="center", fontsize=7)
        top.set_xlabel("sd (yr); share of the variance at the bar end")
        top.set_title("Uncertainty budget", loc="left")
        kinds = list(dict.fromkeys(b.kind for b in reversed(items)))
        top.legend(handles=[_patch(KIND_COLOURS[k], k) for k in kinds], title="kind",
                   loc="upper left", bbox_to_anchor=(1.01, 1.0), frameon=False, fontsize=7,
                   title_fontsize=7)
        bottom.barh(range(len(rows)), [w for _, w in rows],
                    color=[COLOURS["ink"]] + [COLOURS["band"]] * (len(rows) - 1))
        bottom.set_yticks(range(len(rows)), [_wrap(c) for c, _ in rows], fontsize=7)
        bottom.invert_yaxis()
        bottom.set_xlabel("width of the 95 % lag interval (yr)")
        bottom.set_title("What would narrow it", loc="left")
    return fig


def _patch(colour, label):
    from matplotlib.patches import Patch

    return Patch(color=colour, label=label)


def _wrap(text, width=44):
    import textwrap

    return "\n".join(textwrap.wrap(text, width)) or text


def survey_figure(result, ax=None):
    """Every pair's lag with its 95 % interval, and the combined estimate."""
    rows = sum(p.lag is not None for p in result.pairs)
    return on_axes(ax, (8.5, 0.32 * rows + 1.6), lambda ax: _draw_survey(result, ax))


def _draw_survey(result, ax):
    pairs = [p for p in result.pairs if p.lag is not None]
    for k, pair in enumerate(pairs):
        colour = COLOURS["a"] if pair.clear else COLOURS["band"]
        ax.plot(pair.lag.ci95, [k, k], color=colour, lw=1.5)
        ax.plot(pair.lag.median, k, "o", color=colour, ms=4)
    labels = [p.label + ("" if p.clear else " (not combined)") for p in pairs]
    if result.combined is not None:
        k = len(pairs) + 0.6
        ax.plot(result.combined.ci95, [k, k], color=COLOURS["lag"], lw=3)
        ax.plot(result.combined.median, k, "D", color=COLOURS["lag"], ms=6)
        labels.append("combined")
    ax.set_yticks(list(range(len(pairs))) + ([len(pairs) + 0.6] if result.combined else []),
                  labels, fontsize=7)
    ax.axvline(0.0, color=COLOURS["ink"], lw=1, ls=":")
    ax.invert_yaxis()
    ax.set_xlabel("lag = age(a) - age(b) (yr); positive: a happened first")
    ax.set_title("Survey: each pair's lag (95 %) and the combination", loc="left")




#: Pairs drawn on one page of a survey's marker fits.
PAIRS_PER_PAGE = 6


def q_shares(result):
    """Each combined pair's share of Cochran's Q, by its index in ``result.pairs`` (pairs not
    combined have none); see :func:`align.heterogeneity.q_shares`."""
    from align.heterogeneity import q_shares as shares

    used = [k for k, p in enumerate(result.pairs) if p.lag is not None and p.clear]
    if len(used) < 2:
        return {}
    lags = [result.pairs[k].lag for k in used]
    return dict(zip(used, shares([g.median for g in lags], [g.sd ** 2 for g in lags])))


def fit_pages(result, per_page=PAIRS_PER_PAGE):
    """The pairs with markers, outlying first (largest share of Q first, then pairs not
    combined), as pages of at most ``per_page`` indices into ``result.pairs``."""
    shares = q_shares(result)
    drawn = [k for k, p in enumerate(result.pairs) if p.a is not None and p.b is not None]
    drawn.sort(key=lambda k: -shares.get(k, -1.0))
    return [drawn[i:i + per_page] for i in range(0, len(drawn), per_page)]


def pair_fit_figure(result, indices):
    """Small multiples: for each pair (a row), how its markers a (left) and b (right) were
    picked in their windows, titled with the pair's lag and its share of Q."""
    shares = q_shares(result)
    largest = ({s.label for s in result.heterogeneity.largest}
               if result.heterogeneity is not None and result.heterogeneity.significant
               else set())
    with styled((8.5, 1.45 * len(indices) + 0.9), nrows=len(indices), ncols=2,
                squeeze=False) as (fig, axes):
        for row, k in zip(axes, indices):
            pair = result.pairs[k]
            share = f"; {shares[k]:.0%} of Q" if k in shares else "; not combined"
            lag = (f"lag {pair.lag.median:.1f} yr (95 %: {pair.lag.ci95[0]:.1f} to "
                   f"{pair.lag.ci95[1]:.1f})" if pair.lag is not None else "no lag")
            unclear = [side for side in ("a", "b")
                       if not getattr(getattr(pair, side), "clear_transition", True)]
            for ax, side in zip(row, ("a", "b")):
                _draw_fit(ax, getattr(pair, side), side)
            row[0].set_title(f"{pair.label}: {lag}{share}"
                             + "".join(f"; {side} NOT clear" for side in unclear),
                             loc="left", fontsize=8,
                             color=COLOURS["b"] if pair.label in largest else COLOURS["ink"])
        for ax in axes[-1]:
            ax.set_xlabel(f"age (yr {result.age_reference})", fontsize=7)
    return fig


def _draw_fit(ax, marker, side):
    """One marker's fit in a small panel (samples as steps; the kind draws its fit)."""
    from align.markers import kind_of

    colour = COLOURS[side]
    trace = marker.trace
    _steps(ax, trace.age_top, trace.age_bottom, trace.value, colour)
    kind_of(marker.kind).draw(ax, marker, colour)
    label = (with_units(marker.variable, marker.units, marker.reference_scale)
             if trace.age_top else marker.kind)
    ax.set_ylabel(f"{side}: {label}", fontsize=7, color=colour)
    ax.tick_params(labelsize=6)
    if not ax.xaxis_inverted():
        ax.invert_xaxis()


def pair_fit_figures(result):
    """The survey's marker fits, page by page: ``{"pairs-1": Figure, ...}``."""
    return {f"pairs-{n}": pair_fit_figure(result, page)
            for n, page in enumerate(fit_pages(result), start=1)}


#: Points a marker's fitted curves keep in a survey (its samples are all kept).
FIT_POINTS = 40


def compact_marker(marker, points=FIT_POINTS):
    """A copy of ``marker`` small enough to keep for every pair of a survey: its fitted curves
    thinned to at most ``points`` points, ages rounded to 0.1 yr and values to 4 significant
    digits (enough to draw its fit in a small panel; its estimates are kept as they are)."""
    trace = marker.trace
    n = len(trace.curve_age)
    keep = np.unique(np.linspace(0, n - 1, min(n, points)).round().astype(int)) if n else []

    def ages(values, pick=None):
        return [round(values[i], 1) for i in (range(len(values)) if pick is None else pick)]

    def values(data, pick=None):
        chosen = data if pick is None or not data else [data[i] for i in pick]
        return [None if v is None else float(f"{v:.4g}") for v in chosen]

    thin = trace.model_copy(update={
        "age_top": ages(trace.age_top), "age_bottom": ages(trace.age_bottom),
        "value": values(trace.value), "curve_age": ages(trace.curve_age, keep),
        **{name: values(getattr(trace, name), keep)
           for name in ("curve", "band_low", "band_high", "threshold")}})
    return marker.model_copy(update={"trace": thin})


def xcorr_figure(result, ax=None):
    """Correlation against lag with the surrogates' pointwise 95 % band, the peak lag and its
    95 % interval."""
    return on_axes(ax, (8.5, 3.2), lambda ax: _draw_xcorr(result, ax))


def _draw_xcorr(result, ax):
    curve = result.curve
    values = [np.nan if v is None else v for v in curve.r]
    if curve.surrogate_low:
        ax.fill_between(curve.lags, [np.nan if v is None else v for v in curve.surrogate_low],
                        [np.nan if v is None else v for v in curve.surrogate_high],
                        color=COLOURS["band"], alpha=0.6, lw=0,
                        label=f"{result.surrogates.kind} surrogates, 95 %")
    ax.plot(curve.lags, values, color=COLOURS["ink"], lw=1.3, label="r")
    ax.axvspan(*result.peak_lag.ci95, color=COLOURS["lag"], alpha=0.2, lw=0,
               label="peak lag 95 %")
    ax.axvline(result.peak_lag.median, color=COLOURS["lag"], lw=1.5,
               label=f"peak lag {result.peak_lag.median:.1f} yr")
    ax.axvline(0.0, color=COLOURS["ink"], lw=1, ls=":")
    ax.axhline(0.0, color=COLOURS["light"], lw=1)
    ax.set_xlabel("lag (yr); positive: the pattern is older in a")
    ax.set_ylabel("correlation r")
    ax.set_title(f"Cross-correlation of {result.a} with {result.b}", loc="left")
    _legend_beside(ax)


def lag_figures(result):
    """All figures of a lag report, by name."""
    return {"overview": overview_figure(result), "marker_a": marker_figure(result.a, "a"),
            "marker_b": marker_figure(result.b, "b"), "lag": lag_figure(result),
            "budget": budget_figure(result)}


def synchrony_figure(result):
    """Each site's age (68 % and 95 %) with its outlier probability, and the combined age's
    95 % band (hatched when the dates do not support one common age). Drawn on a
    :class:`matplotlib.figure.Figure` (no pyplot state)."""
    sites = result.sites
    with styled((7.5, 0.42 * len(sites) + 1.9)) as (fig, ax):
        comb = result.combined
        if comb.supported:
            ax.axvspan(*comb.age.ci95, color=COLOURS["lag"], alpha=0.15, lw=0,
                       label="combined 95 %")
        else:
            ax.axvspan(*comb.age.ci95, facecolor="none", edgecolor=COLOURS["lag"], lw=0,
                       hatch="//", alpha=0.5, label="combined 95 % (NOT supported)")
        ax.axvline(comb.age.median, color=COLOURS["lag"], lw=1, ls="--")
        for k, site in enumerate(sites):
            counted = site.independent
            flagged = counted and (site.outlier_probability or 0.0) > 0.5
            colour = (COLOURS["b"] if flagged else COLOURS["a"]) if counted else COLOURS["band"]
            ax.plot(site.age.ci95, [k, k], color=colour, lw=1.2)
            ax.plot(site.age.ci68, [k, k], color=colour, lw=3.5, solid_capstyle="butt")
            ax.plot(site.age.median, k, "o" if counted else "s", color=colour, ms=4.5,
                    mfc="white" if not counted else colour)
        labels = [s.label + ("" if s.independent else " (not counted)") for s in sites]
        ax.set_yticks(range(len(sites)), labels, fontsize=8)
        ax.set_ylim(len(sites) - 0.4, -0.8)
        right = ax.secondary_yaxis("right")
        right.set_yticks(range(len(sites)), ["-" if s.outlier_probability is None else
                                             f"{s.outlier_probability:.2f}" for s in sites],
                         fontsize=8)
        right.set_ylabel("P(outlier)")
        ax.legend(loc="upper left", frameon=False, fontsize=8)
        ax.set_title(f"Sites of one horizon: {result.test.p_value_text} for one common age",
                     loc="left")
        _age_axis(ax, result.age_reference)
    return fig
