"""Plain-text renderings of results for a terminal (the CLI's default output)."""

from __future__ import annotations


def record_info(info):
    """``corealign info`` as aligned lines of text.

    Parameters
    ----------
    info : align.schema.RecordInfo

    Returns
    -------
    str
    """
    lines = [f"record      {info.name}", f"source      {info.source}",
             f"sha256      {info.checksum}"]
    for key in ("archive", "site", "core", "timescale", "timescale_kind"):
        value = getattr(info, key)
        if value:
            lines.append(f"{key.replace('_', ' '):<11} {value}")
    lines.append(f"samples     {info.n_samples}")
    for name, coord in (("depth", info.depth), ("age", info.age)):
        if coord is None:
            continue
        unit = coord.units + (f" {info.age_reference}" if name == "age" else "")
        derived = " (bounds derived half-way between mid-points)" if coord.bounds_derived else ""
        lines.append(f"{name:<11} {coord.range[0]:g} to {coord.range[1]:g} {unit}; sample "
                     f"interval median {coord.interval.median:.4g}, min {coord.interval.min:.4g}"
                     f", max {coord.interval.max:.4g} {coord.units}{derived}")
    members = f" ({info.ensemble_members} members)" if info.ensemble_members else ""
    lines.append(f"uncertainty {info.uncertainty}{members}")
    lines.append("variables")
    width = max([len(v.name) for v in info.variables] + [4])
    for var in info.variables:
        lines.append(f"  {var.name:<{width}}  {var.units or '(no units)':<10} "
                     f"{var.n_valid} values, {var.n_missing} missing"
                     + (f"  {var.long_name}" if var.long_name and var.long_name != var.name
                        else ""))
    return "\n".join(lines)


def estimate_line(est, unit="yr"):
    """An estimate as ``median unit (95 %: lo to hi)``."""
    return f"{est.median:.1f} {unit} (95 %: {est.ci95[0]:.1f} to {est.ci95[1]:.1f})"


def marker(result):
    """A marker result as a few lines of text (each kind writes its own body)."""
    from align.markers import kind_of

    lines = [f"{result.kind} in {result.record} {result.variable}, window "
             f"{result.window[0]:g} to {result.window[1]:g} {result.age_reference}"]
    lines += kind_of(result.kind).text(result)
    lines.append(f"method      {result.method}")
    return "\n".join(lines)


def lag(result):
    """A lag result: the verdict, the budget and the what-ifs, then the assumptions."""
    ref = result.age_reference
    lines = [result.verdict + ".",
             f"lag a - b   {result.lag.median:.1f} yr (68 %: {result.lag.ci68[0]:.1f} to "
             f"{result.lag.ci68[1]:.1f}; 95 %: {result.lag.ci95[0]:.1f} to "
             f"{result.lag.ci95[1]:.1f}); P(a before b) = {result.lag.p_a_before_b:.3f}",
             f"a           {estimate_line(result.a.age, ref)}",
             f"b           {estimate_line(result.b.age, ref)}",
             f"timescales  {result.relation}",
             "budget (share of the variance, sd):"]
    for item in sorted(result.budget, key=lambda b: -b.share):
        lines.append(f"  {item.share:6.1%}  {item.sd:7.2f} yr  {item.component}")
    lines.append(f"resolution floor {result.resolution_floor:.2f} yr (sampling alone)")
    lines.append("what would narrow the 95 % interval "
                 f"(now {result.lag.ci95[1] - result.lag.ci95[0]:.0f} yr wide):")
    for row in result.what_if:
        lines.append(f"  {row.change}: {row.ci95[0]:.0f} to {row.ci95[1]:.0f} "
                     f"({row.width:.0f} yr)")
    lines.append("assumptions:")
    lines += [f"  - {a}" for a in result.assumptions]
    return "\n".join(lines)


def xcorr(result):
    """A cross-correlation result in a few lines."""
    from align.xcorr import p_value_words

    p = result.p_value_text or p_value_words(result.p_value, result.surrogates.count)
    return "\n".join([
        f"cross-correlation of {result.a} with {result.b} ({result.method}), window "
        f"{result.window[0]:g} to {result.window[1]:g} {result.age_reference}",
        f"peak lag    {result.peak_lag.median:.1f} yr (95 %: {result.peak_lag.ci95[0]:.1f} to "
        f"{result.peak_lag.ci95[1]:.1f}; {result.peak_lag.source}); positive: the pattern is "
        "older in a",
        f"peak r      {result.peak_correlation:.3f}, {p} against {result.surrogates.count} "
        f"{result.surrogates.kind} surrogates; n_eff {result.n_eff:.1f}",
        f"grid step   {result.grid_step:g} yr"])


def survey(result):
    """A survey: what it compares, one line per pair (with its markers when they differ
    between pairs), then the combination."""
    from align.heterogeneity import spread_interval

    sides = pair_sides(result)
    differ = len(set(sides)) > 1
    lines = [survey_subject(result)]
    for pair, (a, b) in zip(result.pairs, sides):
        if pair.lag is None:
            lines.append(f"{pair.label:<12} no lag: {pair.error}")
        else:
            flag = "" if pair.clear else "  (unclear marker: not combined)"
            lines.append(f"{pair.label:<12} {pair.lag.median:8.1f} yr (95 %: "
                         f"{pair.lag.ci95[0]:.1f} to {pair.lag.ci95[1]:.1f}){flag}")
        if differ:
            lines.append(f"{'':<12} a: {a}; b: {b}")
    lines.append(f"{result.systematic} ({result.n_used} pairs combined)")
    if result.heterogeneity:
        h = result.heterogeneity
        lines.append(f"heterogeneity: Q = {h.q:.1f} on {h.dof} dof (p = {h.p_value:.3g}), "
                     f"between-pair sd {h.tau:.1f} yr ({spread_interval(h, '{:.1f}'.format)})")
    if result.prediction95:
        lines.append(f"new pair (95 % prediction): {result.prediction95[0]:.1f} to "
                     f"{result.prediction95[1]:.1f} yr")
    return "\n".join(lines)


def synchrony(result):
    """A synchrony result: the verdict, one line per site, the test, combined age, spread,
    influence and what-if rows, then the cautions."""
    ref = result.age_reference
    lines = [result.verdict, "", f"{'site':<10} {'median':>9} {'95 % interval':>19}  "
             f"{'P(outlier)':>10}  counted  chronology"]
    for site in result.sites:
        prob = "-" if site.outlier_probability is None else f"{site.outlier_probability:.2f}"
        lines.append(f"{site.label:<10} {site.age.median:9.1f} {site.age.ci95[0]:9.1f} to "
                     f"{site.age.ci95[1]:7.1f}  {prob:>10}  "
                     f"{'yes' if site.independent else 'NO ':<7}  {site.chronology or '-'}")
    test, comb, spread = result.test, result.combined, result.spread
    lines += ["", f"test        T = {test.statistic:.2f} on {test.dof} dof, "
                  f"{test.p_value_text} ({test.calibration}); "
                  + ("consistent with one common age" if test.consistent else
                     "NOT consistent with one common age"),
              f"combined    {estimate_line(comb.age, ref)}; {comb.label}",
              f"spread      between-site sd {spread.tau:.1f} yr ("
              + ("95 % interval empty" if spread.ci95 is None else
                 f"95 %: {spread.ci95[0]:.1f} to {spread.ci95[1]:.1f}") + f"); {spread.statement}"]
    decisive = [r for r in result.leave_one_out if r.decisive]
    for row in decisive:
        lines.append(f"decisive    {row.label}: {row.reason} (without it "
                     f"{row.p_value_text}, combined {row.combined.median:.1f})")
    lines.append("what if:")
    for row in result.what_if:
        if row.applicable:
            lines.append(f"  {row.change}: {row.p_value_text}, combined "
                         f"{estimate_line(row.combined, ref)}")
        else:
            lines.append(f"  {row.change}: {row.note}")
    lines.append("cautions:")
    lines += [f"  - {c}" for c in result.cautions]
    return "\n".join(lines)


def marker_words(spec):
    """A marker spec (a dict, as a survey's provenance keeps it) in a few words:
    ``Ca onset (NGRIP_10yr.csv)``, ``log(Na) transition midpoint (x.nc)``, ``event ...``."""
    from pathlib import PurePath

    kind = spec.get("kind", "marker")
    if kind == "sites":
        return f"combined age of {len(spec.get('sites') or [])} dated sites"
    variable = str(spec.get("variable", "?"))
    if spec.get("transform"):
        variable = f"{spec['transform']}({variable})"
    position = spec.get("position") or "onset"
    what = (kind if kind != "onset" else "onset" if position == "onset"
            else f"transition {position}")
    record = PurePath(str(spec.get("record", "?"))).name
    return f"{variable} {what} ({record})"


def pair_sides(result):
    """Each pair's markers in words, ``[(a, b), ...]`` in the order of ``result.pairs``, from
    the survey's parameters (the pairs, or the event table's templates)."""
    params = result.provenance.parameters
    pairs = params.get("pairs")
    if pairs:
        return [(marker_words(p["a"]), marker_words(p["b"])) for p in pairs]
    return [(marker_words(params.get("a") or {}), marker_words(params.get("b") or {}))
            ] * len(result.pairs)


def survey_subject(result):
    """What a survey compares, for its headline: ``a, A, against b, B, over N pairs``; when
    the pairs' markers differ, the distinct ones (or how many there are)."""
    sides = pair_sides(result)

    def one(words):
        distinct = list(dict.fromkeys(words))
        if len(distinct) <= 2:
            return " or ".join(distinct)
        return f"{len(distinct)} different markers (see the pairs)"

    a, b = (one([s[k] for s in sides]) for k in (0, 1))
    return f"a, {a}, against b, {b}, over {len(sides)} pairs"
