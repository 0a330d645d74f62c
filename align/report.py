"""Reports: a folder a scientist can keep, send and publish from.

``write_report`` turns a lag or survey result into ``report.json`` (the full result with its
provenance), ``report.md``, ``report.html`` (one self-contained file, figures inline as SVG,
no network access, readable printed) and every figure as SVG and PNG. The Markdown and HTML
are rendered from one list of blocks, and every number in them is formatted from the same
result object that ``report.json`` holds; a report can be redrawn from ``report.json``
alone (``corealign report``).
"""

from __future__ import annotations

import html
import json
import os
import re
import tempfile
from pathlib import Path

from align.choices import ReportFormat, options
from align.errors import InputError
from align.figures import (AGE_NOTE, STYLE, fit_pages, lag_figures, marker_figure,
                           pair_fit_figures, q_shares, survey_figure, synchrony_figure,
                           xcorr_figure)
from align.folders import new_folder
from align.io import read_json
from align.heterogeneity import spread_interval
from align.lag import what_if_for
from align.references import cite
from align.text import pair_sides, survey_subject
from align.schema import (LagResult, MarkerBase, SurveyResult, SynchronyResult, XcorrResult,
                          validate_as)

FORMATS = options(ReportFormat)
CAPTIONS = {
    "overview": "Both records on the common timescale. Samples are steps over their age "
                "intervals; shaded spans are each marker's 95 % interval (dashed: median); the "
                "grey band under each record is its timescale 1-sigma.",
    "marker_a": "Marker a: how it was picked.",
    "marker_b": "Marker b: how it was picked.",
    "lag": "The lag distribution: median, 68 % and 95 % intervals, and the zero line.",
    "budget": "The uncertainty budget (sd of each source; share of the variance) and the "
              "95 % width after each named improvement.",
    "survey": "Each pair's lag with its 95 % interval (grey: not combined) and the combined "
              "estimate.",
    "xcorr": "Correlation against lag (positive: the pattern is older in a); grey band: the "
             "surrogates' central 95 % at each lag; purple: the peak lag with its 95 % "
             "interval.",
    "marker": "How the marker was picked.",
    "pairs": "Each pair's markers as picked in their windows (a left, b right; samples as "
             "steps, the fit with its 95 % band in grey, the marker's 95 % interval shaded); "
             "pairs with the largest share of Cochran's Q first (orange title: named in the "
             "headline), then pairs not combined.",
    "synchrony": "Each site's age: thin line 95 %, thick line 68 %, dot median (orange: "
                 "outlier probability above 0.5; grey squares: not independent, not "
                 "counted); the purple band is the combined age's 95 % interval, hatched "
                 "when a combined age is not supported; right: outlier probability.",
}

#: The files a report folder holds: ``report.*`` and each figure as SVG and PNG.
_REPORT_FILE = re.compile(r"report\.(json|md|html)|({}|pairs-\d+)\.(svg|png)".format(
    "|".join(CAPTIONS)))


def _caption(name):
    """A figure's caption (the pages of a survey's pair fits share one)."""
    return CAPTIONS.get(name) or CAPTIONS[name.split("-")[0]]


def result_model(data):
    """The result class of a saved result's JSON (lag, survey, synchrony, cross-correlation,
    or a marker of any kind)."""
    from align.markers import KINDS

    if "leave_one_out" in data:
        return SynchronyResult
    if "pairs" in data:
        return SurveyResult
    if "peak_lag" in data:
        return XcorrResult
    if data.get("kind") in KINDS and "budget" not in data:
        return KINDS[data["kind"]].result
    return LagResult


def load_result(path):
    """Read a saved result (``report.json`` or ``--json`` output) as a result object."""
    data = read_json(path, "result file")
    if not isinstance(data, dict):
        raise InputError("not a corealign result (expected a JSON object)", source=str(path))
    model = result_model(data)
    try:
        return validate_as(model, data, source=str(path))
    except InputError as exc:
        raise InputError(f"not a {model.__name__}: {exc.message}", source=str(path),
                         field=exc.field or "result") from None


def write_report(result, directory, formats=FORMATS, *, overwrite=False):
    """Write a report folder for a lag, survey, synchrony, cross-correlation or marker result.

    Parameters
    ----------
    result : LagResult, SurveyResult, SynchronyResult, XcorrResult or a marker result
    directory : str or os.PathLike
        The report folder: created, or replaced as a whole (see Notes).
    formats : sequence of {"html", "md", "json"}
    overwrite : bool
        Replace a report already in ``directory`` (refused otherwise, so a report is never
        lost by accident).

    Returns
    -------
    pathlib.Path
        The folder, holding ``report.*`` and each figure as ``<name>.svg`` and ``<name>.png``.

    Notes
    -----
    The files are written into a new folder beside ``directory`` that then takes its place
    (:func:`align.folders.new_folder`): a failure or a kill at any point leaves the old report
    or the new one, never a mix. A folder holding files a report does not write is refused
    rather than replaced.
    """
    unknown = set(formats) - set(FORMATS)
    if unknown:
        raise InputError(f"unknown report format {sorted(unknown)[0]!r}", field="formats")
    folder = Path(directory)
    check_report_folder(folder, overwrite)
    figures, blocks = _contents(result)
    with new_folder(folder) as tmp:
        _write_files(tmp, result, figures, blocks, formats)
    return folder


def check_report_folder(directory, overwrite=False):
    """Refuse, before any work, a report folder that cannot be written: an empty or
    unusable name, a file, a symbolic link, a folder holding a report (unless
    ``overwrite``), a folder holding anything a report does not write (replacing the folder
    would delete it), a place where nothing can be created.

    Raises
    ------
    InputError
        Naming the folder, with field ``output``.
    """
    if (not isinstance(directory, str | os.PathLike) or not str(directory).strip()
            or "\0" in str(directory)):
        raise InputError("the report folder must be a path", field="output")
    folder = Path(directory)
    try:
        link = folder.is_symlink()
        _check_contents(folder, overwrite)
    except OSError as exc:  # a name too long
        raise InputError(f"cannot write here ({exc.strerror})", source=str(folder),
                         field="output") from None
    if link:
        raise InputError("the report folder is a symbolic link; give the folder itself (it "
                         "is replaced as a whole)", source=str(folder), field="output")
    _check_writable(folder)


def _check_writable(folder):
    """A folder can be made beside ``folder``, where the report is written first (tried in
    its parent, or the nearest existing ancestor, and removed again: nothing is left)."""
    ancestor = folder.absolute().parent
    while not ancestor.exists() and ancestor != ancestor.parent:
        ancestor = ancestor.parent
    try:
        os.rmdir(tempfile.mkdtemp(prefix=".corealign-check.", dir=ancestor))
    except OSError as exc:
        raise InputError(f"cannot write here ({exc.strerror})", source=str(folder),
                         field="output") from None


def _check_contents(folder, overwrite):
    if folder.exists() and not folder.is_dir():
        raise InputError("the report folder is an existing file", source=str(folder),
                         field="output")
    if not folder.is_dir():
        return
    names = {p.name for p in folder.iterdir()}
    foreign = sorted(n for n in names if not _REPORT_FILE.fullmatch(n))
    if foreign:
        raise InputError(f"this folder holds files that are not part of a report "
                         f"({foreign[0]!r}); choose a new or empty folder", source=str(folder),
                         field="output")
    if names and not overwrite:
        raise InputError("this folder already holds a report; choose another or overwrite "
                         "it", source=str(folder), field="output")


def _write_files(folder, result, figures, blocks, formats):
    """Every file of a report into ``folder`` (a new, empty folder)."""
    import matplotlib

    svgs = {}
    for name, fig in figures.items():
        with matplotlib.rc_context(STYLE):  # fixed SVG ids: a redrawn report is byte-identical
            fig.savefig(folder / f"{name}.svg", format="svg", metadata={"Date": None})
        fig.savefig(folder / f"{name}.png", format="png", dpi=150)
        svgs[name] = (folder / f"{name}.svg").read_text()
    if "json" in formats:
        (folder / "report.json").write_text(
            json.dumps(result.to_dict(), indent=2, allow_nan=False) + "\n")
    if "md" in formats:
        (folder / "report.md").write_text(markdown(blocks))
    if "html" in formats:
        (folder / "report.html").write_text(page(blocks, svgs))


def _contents(result):
    """The figures (by name) and the blocks of a result's report."""
    if isinstance(result, LagResult):
        return lag_figures(result), lag_blocks(result)
    if isinstance(result, SurveyResult):
        return ({"survey": survey_figure(result), **pair_fit_figures(result)},
                survey_blocks(result))
    if isinstance(result, SynchronyResult):
        return {"synchrony": synchrony_figure(result)}, synchrony_blocks(result)
    if isinstance(result, XcorrResult):
        return {"xcorr": xcorr_figure(result)}, xcorr_blocks(result)
    if isinstance(result, MarkerBase):
        return {"marker": marker_figure(result, "a")}, marker_blocks(result)
    raise InputError(f"no report for a {type(result).__name__}", field="result")


# --------------------------------------------------------------------------------------------
# content


def _kind(marker):
    """The marker's kind, with the transition's point for onset markers not at the onset."""
    position = getattr(marker, "position", None)
    return marker.kind if position in (None, "onset") else f"{marker.kind}: {position}"


def _fmt(value, digits=1):
    return f"{value:.{digits}f}"


def _interval(pair, digits=1):
    return f"{_fmt(pair[0], digits)} to {_fmt(pair[1], digits)}"


def summary(result):
    """The plain-words paragraph that opens a lag report."""
    text = result.verdict + "."
    top = max(result.budget, key=lambda b: b.share)
    text += f" The largest contribution is {_plain(top)} ({top.share:.0%} of the variance)"
    fix = _what_if_for(result, top)
    if fix is not None:
        text += (f"; if we could {fix.change.split(' (')[0]}, the 95 % interval would narrow "
                 f"to {_interval(fix.ci95, 0)} years.")
    elif top.kind == "detection":
        text += ("; it comes from fitting the transition under noise, which only a denser or "
                 "less noisy record across the transition would reduce.")
    else:
        text += "."
    return text + " " + result.assumptions[-1]


def _plain(item):
    """A budget item in a few words."""
    return {"resolution": f"the sample interval of {item.owner}",
            "detection": f"the onset fit of {item.owner} under noise",
            "tie": "the tie-point match uncertainty",
            "bridge": "the uncertainty between tie points"}.get(item.kind, item.component)


def _what_if_for(result, item):
    wanted = what_if_for(item.kind, item.owner)
    return next((w for w in result.what_if if w.key == wanted), None)


def _provenance_rows(prov):
    rows = [[i.role, i.source, i.sha256 or "(none)"] for i in prov.inputs]
    return rows


def lag_blocks(result):
    """The blocks of a lag report (rendered to Markdown and HTML)."""
    lag = result.lag
    ref = result.age_reference
    blocks = [("h1", "Lag report"), ("p", summary(result)),
              ("h2", "Result"),
              ("table", ["quantity", "value"], [
                  ["lag a - b (median)", f"{_fmt(lag.median)} yr"],
                  ["68 % interval", f"{_interval(lag.ci68)} yr"],
                  ["95 % interval", f"{_interval(lag.ci95)} yr"],
                  ["P(a before b)", _fmt(lag.p_a_before_b, 3)],
                  [f"marker a ({_kind(result.a)})", f"{_fmt(result.a.age.median)} yr {ref} "
                                                    f"(95 %: {_interval(result.a.age.ci95)})"],
                  [f"marker b ({_kind(result.b)})", f"{_fmt(result.b.age.median)} yr {ref} "
                                                    f"(95 %: {_interval(result.b.age.ci95)})"],
                  ["timescales", result.relation],
                  ["resolution floor (sampling alone)", f"{_fmt(result.resolution_floor, 2)} yr"],
                  ["smallest lag resolved (95 % interval excluding zero) with "
                   "probability 0.8", f"{_fmt(result.resolvable_lag)} yr"]]),
              ("figure", "overview"), ("figure", "marker_a"), ("figure", "marker_b"),
              ("figure", "lag"),
              ("h2", "What limits the answer"),
              ("table", ["source", "kind", "sd (yr)", "share of variance"],
               [[b.component, b.kind, _fmt(b.sd, 2), f"{b.share:.1%}"]
                for b in sorted(result.budget, key=lambda b: -b.share)]),
              ("h2", "What would narrow it"),
              ("table", ["change", "95 % interval (yr)", "width (yr)"],
               [["as it is", _interval(lag.ci95), _fmt(lag.ci95[1] - lag.ci95[0])]]
               + [[w.change, _interval(w.ci95), _fmt(w.width)] for w in result.what_if]),
              ("figure", "budget"),
              ("h2", "Assumptions"), ("list", result.assumptions),
              ("h2", "Methods"),
              ("list", [f"Marker a: {result.a.method}.", f"Marker b: {result.b.method}.",
                        f"Lag: one joint Monte Carlo of {result.request.draws} draws over every "
                        "source with its correlation; budget shares are each source's variance "
                        "over their sum.", f"Figures: {AGE_NOTE}."]),
              ("h2", "References"), ("list", [cite(k) for k in result.references]),
              *_provenance_blocks(result.provenance)]
    return blocks


def survey_blocks(result):
    """The blocks of a survey report."""
    sides = pair_sides(result)
    differ = len(set(sides)) > 1
    shares = q_shares(result)
    rows = []
    for k, (p, (a, b)) in enumerate(zip(result.pairs, sides)):
        named = [p.label] + ([a, b] if differ else [])
        if p.lag is None:
            rows.append(named + ["-", "-", p.error or "", "-"])
        else:
            rows.append(named + [_fmt(p.lag.median), _interval(p.lag.ci95),
                                 "combined" if p.clear else "not combined (unclear marker)",
                                 f"{shares[k]:.0%}" if k in shares else "-"])
    header = ["pair"] + (["a", "b"] if differ else []) + [
        "lag a - b (yr)", "95 % interval (yr)", "use", "share of Q"]
    combined = result.combined
    table = [] if combined is None else [
        ("table", ["quantity", "value"], [
            ["combined lag (median)", f"{_fmt(combined.median)} yr"],
            ["95 % interval", f"{_interval(combined.ci95)} yr"],
            ["P(a before b)", _fmt(combined.p_a_before_b, 3)],
            ["pairs combined", str(result.n_used)]] + ([] if result.heterogeneity is None else [
                ["heterogeneity Q (dof, p)",
                 f"{_fmt(result.heterogeneity.q, 2)} ({result.heterogeneity.dof}, "
                 f"{_fmt(result.heterogeneity.p_value, 3)})"],
                ["between-pair sd (Q-profile interval)",
                 f"{_fmt(result.heterogeneity.tau)} yr "
                 f"({spread_interval(result.heterogeneity, _fmt)})"]]) + (
                [] if result.prediction95 is None else [
                    ["new pair, 95 % prediction interval",
                     f"{_fmt(result.prediction95[0])} to {_fmt(result.prediction95[1])} yr"]]))]
    pages = [("figure", f"pairs-{n}") for n in range(1, len(fit_pages(result)) + 1)]
    return [("h1", "Survey report"), ("p", survey_headline(result)),
            ("h2", "Combined"), *table, ("figure", "survey"),
            ("h2", "Pairs"), ("table", header, rows),
            *([("h2", "Each pair's markers"), *pages] if pages else []),
            ("h2", "Assumptions"), ("list", result.assumptions),
            ("h2", "References"),
            ("list", [cite(k) for k in result.references]),
            *_provenance_blocks(result.provenance)]


def survey_headline(result):
    """The survey's opening paragraph: what it compares and its verdict (the pairs'
    disagreement first when it is significant), then the caution."""
    subject = survey_subject(result)
    significant = result.heterogeneity is not None and result.heterogeneity.significant
    text = (f"{result.systematic}. Compared: {subject}." if significant
            else f"{subject}: {result.systematic}.")
    return f"{text} {result.assumptions[-1]}"


def _differ(years):
    return "no bound (closer than the errors predict)" if years is None else _fmt(years, 0)


def synchrony_blocks(result):
    """The blocks of a synchrony report."""
    ref = result.age_reference
    test, comb, spread = result.test, result.combined, result.spread
    sites = [[s.label, f"{_fmt(s.age.median)}", _interval(s.age.ci95), s.distribution,
              "-" if s.outlier_probability is None else _fmt(s.outlier_probability, 2),
              "yes" if s.independent else "no: " + (s.note or ""), s.chronology or "-"]
             for s in result.sites]
    loo = [[r.label, r.p_value_text, "yes" if r.consistent else "no",
            f"{_fmt(r.combined.median)} ({_interval(r.combined.ci95)})", _fmt(r.shift),
            r.reason or "-"] for r in result.leave_one_out]
    what_if = [[w.change, ", ".join(w.sites)] + (
        [w.p_value_text, f"{_fmt(w.combined.median)} ({_interval(w.combined.ci95)})",
         _differ(w.could_differ_by)] if w.applicable else [w.note or "", "-", "-"])
        for w in result.what_if]
    return [("h1", "Synchrony report"), ("p", result.verdict),
            ("list", result.cautions),
            ("h2", "Result"),
            ("table", ["quantity", "value"], [
                ["independent sites", str(result.n_independent)],
                ["test of one common age", f"T = {_fmt(test.statistic, 2)} on {test.dof} dof, "
                                           f"{test.p_value_text} ({test.calibration})"],
                [f"combined age (yr {ref})", f"{_fmt(comb.age.median)} (68 %: "
                                             f"{_interval(comb.age.ci68)}; 95 %: "
                                             f"{_interval(comb.age.ci95)})"],
                ["combined age is", comb.label],
                ["between-site sd (yr)", f"{_fmt(spread.tau)} ("
                                         + ("95 % interval empty" if spread.ci95 is None else
                                            f"95 %: {_interval(spread.ci95)}") + ")"],
                ["spread in words", spread.statement]]),
            ("figure", "synchrony"),
            ("h2", "Sites"),
            ("table", ["site", f"median (yr {ref})", "95 % interval", "distribution",
                       "P(outlier)", "counted", "chronology"], sites),
            ("h2", "Leave one out"),
            ("table", ["without", "p", "consistent", "combined (95 %)", "shift (yr)",
                       "decisive"], loo),
            ("h2", "What if"),
            ("table", ["change", "sites", "p", "combined (95 %)", "could differ by (yr)"],
             what_if),
            ("h2", "Assumptions"), ("list", result.assumptions),
            ("h2", "References"),
            ("list", [cite(k) for k in result.references]),
            *_provenance_blocks(result.provenance)]


def xcorr_blocks(result):
    """The blocks of a cross-correlation report."""
    ref = result.age_reference
    from align.xcorr import p_value_words

    p = result.p_value_text or p_value_words(result.p_value, result.surrogates.count)
    peak = result.peak_lag
    order = ("the pattern is older in a" if peak.ci95[0] > 0
             else "the pattern is younger in a" if peak.ci95[1] < 0
             else "the interval includes zero, so neither record is shown to lead")
    verdict = ("" if result.p_value is None else
               " (significant at 5 %)" if result.p_value < 0.05 else " (not significant at 5 %)")
    lead = (f"The best match of {result.a} with {result.b} is at a lag of {_fmt(peak.median)} "
            f"yr (95 %: {_interval(peak.ci95)}): {order}. Peak r = "
            f"{_fmt(result.peak_correlation, 2)}, {p}{verdict}; effective sample size "
            f"{_fmt(result.n_eff)}. A correlation shows a shared pattern, not a cause.")
    return [("h1", "Cross-correlation report"), ("p", lead),
            ("h2", "Result"),
            ("table", ["quantity", "value"], [
                ["records", f"a: {result.a}; b: {result.b}"],
                ["window", f"{_interval(result.window, 0)} yr {ref}"],
                ["peak lag (median)", f"{_fmt(result.peak_lag.median)} yr (positive: the "
                                      "pattern is older in a)"],
                ["95 % interval of the peak lag", f"{_interval(result.peak_lag.ci95)} yr "
                                                  f"({result.peak_lag.source})"],
                ["peak correlation", _fmt(result.peak_correlation, 3)],
                [f"p against {result.surrogates.count} {result.surrogates.kind} surrogates", p],
                ["effective sample size", _fmt(result.n_eff)],
                ["grid step", f"{result.grid_step:g} yr"]]),
            ("figure", "xcorr"),
            ("h2", "Assumptions"),
            ("list", ["The surrogates keep each record's autocorrelation (phase randomisation "
                      "or AR(1)); the p-value is that of the largest |r| over the whole lag "
                      "range, so it accounts for having searched all lags.",
                      "A correlation shows a shared pattern, not a cause; a lag within its "
                      "interval of zero shows no order."]),
            ("h2", "References"),
            ("list", [cite(k) for k in ("ebisuzaki1997", "bretherton1999", "rehfeld2011")]),
            *_provenance_blocks(result.provenance)]


def marker_blocks(marker):
    """The blocks of a single marker's report (an event, an onset, combined sites)."""
    from align.markers import kind_of

    ref = marker.age_reference
    unclear = (f"; {marker.reason}" if getattr(marker, "clear_transition", True) is False
               and marker.reason else "")
    return [("h1", f"Marker report: {marker.kind}"),
            ("p", f"{kind_of(marker.kind).describe(marker)}: {_fmt(marker.age.median)} yr {ref} "
                  f"(95 %: {_interval(marker.age.ci95)}){unclear}."),
            ("h2", "Result"), ("pre", "\n".join(kind_of(marker.kind).text(marker))),
            ("figure", "marker"),
            ("h2", "Method"), ("p", marker.method),
            ("h2", "References"), ("list", [cite(k) for k in marker.references]),
            *_provenance_blocks(marker.provenance)]


def _provenance_blocks(prov):
    return [("h2", "Provenance"),
            ("table", ["input", "source", "SHA-256"], _provenance_rows(prov)),
            ("p", f"corealign {prov.version}; seed {prov.seed}; created {prov.created}."),
            ("pre", json.dumps(prov.parameters, indent=2, default=str))]


# --------------------------------------------------------------------------------------------
# rendering


def markdown(blocks):
    """Blocks as Markdown (figures as PNG links)."""
    out = []
    for block in blocks:
        kind = block[0]
        if kind in ("h1", "h2"):
            out.append(("#" if kind == "h1" else "##") + " " + block[1])
        elif kind == "p":
            out.append(block[1])
        elif kind == "list":
            out.append("\n".join(f"- {item}" for item in block[1]))
        elif kind == "pre":
            out.append(f"```json\n{block[1]}\n```")
        elif kind == "figure":
            out.append(f"![{_caption(block[1])}]({block[1]}.png)\n\n*{_caption(block[1])}*")
        elif kind == "table":
            header, rows = block[1], block[2]
            lines = ["| " + " | ".join(header) + " |", "|" + " --- |" * len(header)]
            lines += ["| " + " | ".join(str(c).replace("|", "\\|") for c in row) + " |"
                      for row in rows]
            out.append("\n".join(lines))
    return "\n\n".join(out) + "\n"


_CSS = """
body{font-family:system-ui,-apple-system,"Segoe UI",sans-serif;max-width:60rem;margin:2rem auto;
padding:0 1rem;color:#222;line-height:1.45}
h1{font-size:1.6rem}h2{font-size:1.2rem;margin-top:2rem;border-bottom:1px solid #ddd}
p.summary{font-size:1.1rem;background:#f4f6fa;border-left:4px solid #1f5fa6;padding:.8rem 1rem}
table{border-collapse:collapse;margin:.5rem 0;font-size:.92rem}
td,th{border:1px solid #ccc;padding:.25rem .5rem;text-align:left;vertical-align:top}
figure{margin:1rem 0}figure svg{max-width:100%;height:auto}
figcaption{font-size:.85rem;color:#555}pre{background:#f6f6f6;padding:.5rem;overflow:auto;
font-size:.8rem;white-space:pre-wrap;overflow-wrap:anywhere}
@media print{body{margin:0;max-width:none}figure,table{page-break-inside:avoid}}
"""


def page(blocks, svgs):
    """Blocks as one self-contained HTML page (inline SVG figures, inline CSS)."""
    body = []
    first_paragraph = True
    for block in blocks:
        kind = block[0]
        if kind in ("h1", "h2"):
            body.append(f"<{kind}>{html.escape(block[1])}</{kind}>")
        elif kind == "p":
            cls = ' class="summary" id="summary"' if first_paragraph else ""
            first_paragraph = False
            body.append(f"<p{cls}>{html.escape(block[1])}</p>")
        elif kind == "list":
            body.append("<ul>" + "".join(f"<li>{html.escape(i)}</li>" for i in block[1])
                        + "</ul>")
        elif kind == "pre":
            body.append(f"<pre>{html.escape(block[1])}</pre>")
        elif kind == "figure":
            svg = _inline_svg(svgs[block[1]])
            body.append(f'<figure id="figure-{block[1]}">{svg}<figcaption>'
                        f"{html.escape(_caption(block[1]))}</figcaption></figure>")
        elif kind == "table":
            head = "".join(f"<th>{html.escape(h)}</th>" for h in block[1])
            rows = "".join("<tr>" + "".join(f"<td>{html.escape(str(c))}</td>" for c in row)
                           + "</tr>" for row in block[2])
            body.append(f"<table><thead><tr>{head}</tr></thead><tbody>{rows}</tbody></table>")
    title = html.escape(blocks[0][1])
    return ("<!DOCTYPE html>\n<html lang=\"en\"><head><meta charset=\"utf-8\">"
            f"<title>{title}</title><style>{_CSS}</style></head><body>\n"
            + "\n".join(body) + "\n</body></html>\n")


def _inline_svg(text):
    start = text.find("<svg")
    return text[start:] if start >= 0 else text
