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

COLOURS = {"a": "#1f5fa6", "b": "#d9730d", "lag": "#6a3d9a", "ink": "#333333",
           "band": "#bdbdbd", "light": "#e6e6e6"}
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
    it (no line across them)."""
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
    marker with its 95 % interval, and under each record its timescale sd as a band."""
    with styled((7.5, 6.2), nrows=4, ncols=1, sharex=True,
                gridspec_kw={"height_ratios": [3, 1, 3, 1]}) as (fig, axes):
        for row, (side, excerpt, marker) in enumerate(
                (("a", result.figures.records[0], result.a),
                 ("b", result.figures.records[1], result.b))):
            ax, band = axes[2 * row], axes[2 * row + 1]
            colour = COLOURS[side]
            _steps(ax, excerpt.age_top, excerpt.age_bottom, excerpt.value, colour)
            interval_span(ax, marker.age, colour, f"{marker.kind} {side}")
            unit = f" ({excerpt.units})" if excerpt.units else ""
            ax.set_ylabel(f"{excerpt.variable}{unit}")
            ax.set_title(f"{excerpt.label}: {marker.kind} in {excerpt.variable}", loc="left")
            ax.legend(loc="best", frameon=False, fontsize=8)
            mids = 0.5 * (np.asarray(excerpt.age_top) + np.asarray(excerpt.age_bottom))
            band.fill_between(mids, 0, excerpt.timescale_sd, color=COLOURS["band"], lw=0,
                              step="mid")
            band.set_ylabel("timescale\nsd (yr)", fontsize=7)
            band.set_ylim(bottom=0)
        _age_axis(axes[-1], result.age_reference)
        fig.suptitle("The two records on one timescale", x=0.01, ha="left", fontsize=11,
                     fontweight="bold")
    return fig


def marker_figure(marker, side, ax=None):
    """How a marker was picked (each kind draws its own: :meth:`MarkerKind.draw`)."""
    from align.markers import kind_of

    if ax is None:
        with styled((7.5, 3.0)) as (fig, ax):
            marker_figure(marker, side, ax)
        return fig
    colour = COLOURS[side]
    trace = marker.trace
    _steps(ax, trace.age_top, trace.age_bottom, trace.value, colour, "samples")
    ax.set_title(kind_of(marker.kind).draw(ax, marker, colour), loc="left")
    ax.set_ylabel(marker.variable)
    ax.legend(loc="best", frameon=False, fontsize=7)
    _age_axis(ax, marker.age_reference)
    return ax.figure


def lag_figure(result):
    """The lag distribution with its median, 68 % and 95 % intervals and the zero line."""
    hist = result.figures.lag_histogram
    edges = np.asarray(hist.edges)
    with styled((7.5, 3.0)) as (fig, ax):
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
        ax.legend(loc="upper right", frameon=False, fontsize=8)
    return fig


def budget_figure(result):
    """The uncertainty budget as bars (sd of each source) and the what-if 95 % widths."""
    items = sorted(result.budget, key=lambda b: b.share)
    width_now = result.lag.ci95[1] - result.lag.ci95[0]
    with styled((9.5, 3.4), nrows=1, ncols=2,
                gridspec_kw={"width_ratios": [1.2, 1]}) as (fig, (left, right)):
        colours = [COLOURS["a"] if b.kind == "resolution" else
                   COLOURS["b"] if b.kind == "detection" else COLOURS["lag"] for b in items]
        left.barh(range(len(items)), [b.sd for b in items], color=colours)
        left.set_yticks(range(len(items)), [_short(b.component) for b in items], fontsize=7)
        for k, b in enumerate(items):
            left.text(b.sd, k, f" {b.share:.0%}", va="center", fontsize=7)
        left.set_xlabel("sd (yr); share of the variance at the bar end")
        left.set_title("Uncertainty budget", loc="left")
        rows = [("now", width_now)] + [(w.change, w.width) for w in result.what_if]
        right.barh(range(len(rows)), [w for _, w in rows],
                   color=[COLOURS["ink"]] + [COLOURS["band"]] * (len(rows) - 1))
        right.set_yticks(range(len(rows)), [_short(c, 34) for c, _ in rows], fontsize=7)
        right.invert_yaxis()
        right.set_xlabel("width of the 95 % lag interval (yr)")
        right.set_title("What would narrow it", loc="left")
    return fig


def survey_figure(result):
    """Every pair's lag with its 95 % interval, and the combined estimate."""
    pairs = [p for p in result.pairs if p.lag is not None]
    with styled((7.5, 0.32 * len(pairs) + 1.6)) as (fig, ax):
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
    return fig


def _short(text, limit=48):
    return text if len(text) <= limit else text[: limit - 1] + "…"


def lag_figures(result):
    """All figures of a lag report, by name."""
    return {"overview": overview_figure(result), "marker_a": marker_figure(result.a, "a"),
            "marker_b": marker_figure(result.b, "b"), "lag": lag_figure(result),
            "budget": budget_figure(result)}
