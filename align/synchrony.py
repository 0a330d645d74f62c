"""Synchrony: is one horizon the same age at many sites?

A horizon (a tephra, a spike, a sharp proxy change) found at several sites, each dated on its
own chronology, is called synchronous when the dates agree with one common age. This module
answers the questions a reviewer asks of such a claim, all from one set of Monte Carlo draws
of the sites' ages on a common reference:

- each site's age (median, 68 % and 95 %);
- a consistency test of one common age over the independent sites: the generalised
  chi-square of Ward & Wilson (1978) with the full covariance (sites on one chronology share
  its error), calibrated by Monte Carlo when a site's distribution is far from Gaussian;
- the combined age (generalised least squares), labelled "not supported" when the test fails;
- the spread of the true ages between sites (DerSimonian & Laird 1986) with its Q-profile
  95 % interval (Viechtbauer 2007);
- each site's outlier probability under the mixture model of Christen (1994), by Gibbs
  sampling;
- leave-one-out influence ("decisive" sites) and what-if rows over other choices of sites.

The formulas are pure functions on numpy arrays that take batches (leading axes), so the
calibration tests run them over hundreds of synthetic site sets at once.

References
----------
Ward, G. K. and Wilson, S. R. (1978), Procedures for comparing and combining radiocarbon age
determinations: a critique. Archaeometry 20, 19-31, doi:10.1111/j.1475-4754.1978.tb00208.x.
DerSimonian, R. and Laird, N. (1986), Meta-analysis in clinical trials. Controlled Clinical
Trials 7, 177-188, doi:10.1016/0197-2456(86)90046-2.
Viechtbauer, W. (2007), Confidence intervals for the amount of heterogeneity in
meta-analysis. Statistics in Medicine 26, 37-52, doi:10.1002/sim.2514.
Christen, J. A. (1994), Summarizing a set of radiocarbon determinations: a robust approach.
Applied Statistics 43, 489-503, doi:10.2307/2986273.
"""

from __future__ import annotations

from dataclasses import dataclass
from pathlib import Path

import numpy as np

from align.ages import convert_age
from align.choices import DEFAULT_AGE_REFERENCE, DEFAULT_LAG_DRAWS, DEFAULT_OUTLIER_PRIOR
from align.errors import InputError
from align.sites import check_draws, read_draws, sites_request

#: Level of the consistency test.
LEVEL = 0.05
#: Outlier model: prior sd of a shifted site's shift, in units of that site's own sd.
SHIFT_SCALE = 3.0
#: Fewest independent sites among which one can be singled out as the outlier (of two
#: disagreeing dates either could be the one that is off).
MIN_OUTLIER_SITES = 3
TWO_SITES = "two sites cannot tell which of them is off, so no outlier is singled out"
#: A site is "near Gaussian" when |skewness| and |excess kurtosis| of its draws stay below.
GAUSSIAN_SKEW, GAUSSIAN_KURTOSIS = 0.2, 0.5
Z95 = 1.959963984540054
CAUTIONS = (
    "Consistency with one common age does not prove synchrony: it may only reflect wide "
    "errors.",
    "Dates that agree within their uncertainty show no cause: they say neither why the event "
    "happened nor that a change at one site drove one at another.",
    "A combined age from inconsistent dates is not meaningful.",
    "An outlier flag is a prompt to re-examine that site, not a licence to drop it.")


# --------------------------------------------------------------------------------------------
# formulas (batched over leading axes)


def gls(x, cov):
    """Generalised least-squares common value of correlated estimates.

    Parameters
    ----------
    x : array_like, shape (..., K)
        The estimates (yr).
    cov : array_like, shape (..., K, K)
        Their covariance (yr^2).

    Returns
    -------
    mean : numpy.ndarray, shape (...)
        ``mu = 1' C^-1 x / 1' C^-1 1`` (yr).
    var : numpy.ndarray, shape (...)
        Its variance ``1 / 1' C^-1 1`` (yr^2).
    weights : numpy.ndarray, shape (..., K)
        ``C^-1 1 / 1' C^-1 1`` (sum to one; ``mu = weights . x``).

    Notes
    -----
    With a diagonal covariance these are the inverse-variance weights of Ward & Wilson (1978),
    doi:10.1111/j.1475-4754.1978.tb00208.x.
    """
    return _gls_of_precision(np.asarray(x, dtype=float),
                             np.linalg.inv(np.asarray(cov, dtype=float)))


def _gls_of_precision(x, prec):
    """:func:`gls` from the precision ``C^-1`` (inverted once by the caller)."""
    row = prec.sum(axis=-1)
    total = row.sum(axis=-1)
    weights = row / total[..., None]
    return (weights * x).sum(axis=-1), 1.0 / total, weights


def chi2_statistic(x, cov):
    """The generalised chi-square of one common value (Ward & Wilson 1978, full covariance).

    Parameters
    ----------
    x : array_like, shape (..., K)
    cov : array_like, shape (..., K, K)

    Returns
    -------
    numpy.ndarray, shape (...)
        ``T = (x - mu 1)' C^-1 (x - mu 1)`` with ``mu`` the GLS value; chi-square with K - 1
        degrees of freedom under one common value and Gaussian errors.

    Notes
    -----
    Eq. (3) of Ward & Wilson (1978), doi:10.1111/j.1475-4754.1978.tb00208.x, written with a
    full covariance; with a diagonal one it is Cochran's Q.
    """
    x = np.asarray(x, dtype=float)
    prec = np.linalg.inv(np.asarray(cov, dtype=float))
    mean, _, _ = _gls_of_precision(x, prec)
    r = x - mean[..., None]
    return np.einsum("...i,...ij,...j->...", r, prec, r)


def _projector(cov):
    """``P = C^-1 - C^-1 1 1' C^-1 / 1' C^-1 1``: ``T = x' P x`` for any common value."""
    prec = np.linalg.inv(cov)
    row = prec.sum(axis=-1)
    return prec - row[..., :, None] * row[..., None, :] / row.sum(axis=-1)[..., None, None]


def dl_tau2(x, cov):
    """Between-site variance of the true values by the method of moments.

    Parameters
    ----------
    x : array_like, shape (..., K)
    cov : array_like, shape (..., K, K)

    Returns
    -------
    numpy.ndarray, shape (...)
        ``tau^2 = max(0, (T - (K - 1)) / tr(P))`` (yr^2).

    Notes
    -----
    ``E[T] = K - 1 + tau^2 tr(P)`` when each true value adds an independent N(0, tau^2); with
    a diagonal covariance ``tr(P) = sum w - sum w^2 / sum w`` and this is the estimator of
    DerSimonian & Laird (1986), doi:10.1016/0197-2456(86)90046-2.
    """
    x = np.asarray(x, dtype=float)
    k = x.shape[-1]
    trace = np.trace(_projector(cov), axis1=-2, axis2=-1)
    return np.maximum(0.0, (chi2_statistic(x, cov) - (k - 1)) / trace)


def q_profile(x, cov, level=0.95):
    """Q-profile confidence interval for the between-site variance (one site set).

    Parameters
    ----------
    x : array_like, shape (K,)
    cov : array_like, shape (K, K)
    level : float

    Returns
    -------
    tuple of float
        ``(tau2_low, tau2_high)`` (yr^2), 0 where the profile never reaches its quantile.

    Notes
    -----
    ``Q(tau^2) = T(x, C + tau^2 I)`` falls monotonically in ``tau^2``; the bounds solve
    ``Q(tau2_low) = chi2_{(1+level)/2, K-1}`` and ``Q(tau2_high) = chi2_{(1-level)/2, K-1}``
    (Viechtbauer 2007, Eq. 6, doi:10.1002/sim.2514).
    """
    from scipy.optimize import brentq
    from scipy.stats import chi2

    x = np.asarray(x, dtype=float)
    cov = np.asarray(cov, dtype=float)
    k = x.size
    eye = np.eye(k)

    def q(t):
        return float(chi2_statistic(x, cov + t * eye))

    # the bracket grows from the scale of the dates and the most precise site, so that a
    # site of enormous variance neither sets the tolerance nor the first guess
    start = float(np.var(x)) + float(np.min(np.diag(cov)))
    bounds = []
    for quantile in ((1 + level) / 2, (1 - level) / 2):
        target = chi2.ppf(quantile, k - 1)
        if q(0.0) <= target:
            bounds.append(0.0)
            continue
        high = start
        while q(high) > target:
            high *= 4.0
        bounds.append(brentq(lambda t, target=target: q(t) - target, 0.0, high,
                             xtol=1e-12 * high, rtol=1e-12))
    return bounds[0], bounds[1]


def outlier_probabilities(x, cov, prior, *, rng, chains=64, sweeps=400, burn=100):
    """Posterior probability that each site is shifted, by Gibbs sampling.

    Parameters
    ----------
    x : array_like, shape (..., K)
        Site ages (yr).
    cov : array_like, shape (..., K, K)
        Their covariance (yr^2).
    prior : float
        Prior probability that a site is shifted.
    rng : numpy.random.Generator
    chains, sweeps, burn : int
        Parallel chains per site set, sweeps per chain and the sweeps discarded.

    Returns
    -------
    numpy.ndarray, shape (..., K)

    Notes
    -----
    The model of Christen (1994), doi:10.2307/2986273: ``x = mu 1 + phi * delta + e`` with
    ``e ~ N(0, C)``, ``phi_i ~ Bernoulli(prior)`` and a flat prior on the common age ``mu``.
    The shift's prior ``delta_i ~ N(0, (3 s_i)^2)``, ``s_i`` the site's own sd, is our choice.
    Sweep: ``mu`` from its Gaussian conditional (GLS of ``x - phi * delta``); then for each
    site, with ``L = C^-1``, ``e_i | e_-i ~ N(m_i, 1/L_ii)``, ``m_i = -sum_{j!=i} L_ij e_j /
    L_ii``, so ``r_i = x_i - mu - m_i`` has ``N(0, 1/L_ii)`` without a shift and ``N(0,
    1/L_ii + s_i^2)`` with one (the shift integrated out); ``phi_i`` is drawn from these and
    ``delta_i`` from its Gaussian conditional. The probabilities are averaged (Rao-Blackwell)
    over the kept sweeps and the chains.
    """
    x = np.asarray(x, dtype=float)
    cov = np.asarray(cov, dtype=float)
    batch, k = x.shape[:-1], x.shape[-1]
    prec = np.broadcast_to(np.linalg.inv(cov), batch + (k, k))
    shift_var = (SHIFT_SCALE ** 2) * np.broadcast_to(np.diagonal(cov, axis1=-2, axis2=-1),
                                                     batch + (k,))
    cond_var = 1.0 / np.diagonal(prec, axis1=-2, axis2=-1)  # (..., K)
    row = prec.sum(axis=-1)
    total = row.sum(axis=-1)
    xs = x[..., None, :]  # (..., 1, K): chains on the next axis
    mu_sd = np.sqrt(1.0 / total)[..., None]
    phi = np.zeros(batch + (chains, k), dtype=bool)
    delta = np.zeros(batch + (chains, k))
    acc = np.zeros(batch + (k,))
    log_odds_prior = np.log(prior) - np.log1p(-prior)
    for sweep in range(sweeps):
        y = xs - phi * delta
        mu = ((row[..., None, :] * y).sum(-1) / total[..., None]
              + mu_sd * rng.standard_normal(batch + (chains,)))
        for i in range(k):
            e = xs - mu[..., None] - phi * delta
            e[..., i] = 0.0
            m_i = -(e @ prec[..., i, :, None])[..., 0] * cond_var[..., i, None]
            r = x[..., i, None] - mu - m_i
            v0 = cond_var[..., i, None]
            v1 = v0 + shift_var[..., i, None]
            log_odds = (log_odds_prior - 0.5 * np.log(v1 / v0)
                        - 0.5 * r ** 2 * (1.0 / v1 - 1.0 / v0))
            p1 = 1.0 / (1.0 + np.exp(-np.clip(log_odds, -700, 700)))
            phi[..., i] = rng.random(p1.shape) < p1
            gain = shift_var[..., i, None] / v1
            d = gain * r + np.sqrt(gain * v0) * rng.standard_normal(r.shape)
            delta[..., i] = np.where(phi[..., i], d, 0.0)
            if sweep >= burn:
                acc[..., i] += p1.mean(axis=-1)
    return acc / (sweeps - burn)


def mc_p_value(statistic, cov, errors):
    """Monte Carlo p-value of the generalised chi-square.

    Parameters
    ----------
    statistic : float
        The observed ``T``.
    cov : array_like, shape (K, K)
    errors : array_like, shape (N, K)
        Draws of the sites' errors under one common age (joint, so shared chronologies keep
        their correlation).

    Returns
    -------
    float
        ``(1 + #{T_b >= T}) / (N + 1)`` with ``T_b = e_b' P e_b``.
    """
    proj = _projector(cov)
    null = ((errors @ proj) * errors).sum(axis=1)  # one matrix product (einsum: 30x slower)
    return float((1 + np.count_nonzero(null >= statistic)) / (null.size + 1))


# --------------------------------------------------------------------------------------------
# sites


@dataclass
class Site:
    """One site's age model on the common reference (yr)."""

    label: str
    source: str
    distribution: str
    independent: bool
    chronology: str | None
    mean: float
    own: np.ndarray  # draws of the site's own error (zero mean, yr)
    own_var: float
    shared_sd: float
    gaussian: bool | None = None  # None: judged from the draws
    shared_given: bool = True
    converted: str | None = None  # how its ages reached the common reference, in words

    @property
    def key(self):
        """Chronology key: sites with one key share one error draw."""
        return self.chronology if self.chronology else f"site:{self.label}"


def _conversion(site_ref, reference):
    """``"from BP (b2k = BP + 50)"``: how a site's ages reach the common reference (None when
    they are on it already)."""
    if site_ref == reference:
        return None
    a, b = _affine(site_ref, reference)
    scaled = site_ref if abs(a) == 1 else f"{abs(a):g} x {site_ref}"
    formula = (f"{scaled} {'+' if b >= 0 else '-'} {abs(b):g}" if a > 0 else
               f"{b:g} - {scaled}")
    return f"from {site_ref} ({reference} = {formula})"


def _affine(reference, target):
    """``(a, b)`` with ``age_target = a * age_reference + b`` (exact for every reference)."""
    zero, one = (float(convert_age(v, reference, target)) for v in (2000.0, 2001.0))
    return one - zero, zero - 2000.0 * (one - zero)


def _located_error(exc, label, k, field):
    return InputError(f"site {label!r}: {exc.message}", source=exc.source,
                      field=f"sites.{k}.{field}", status=exc.status)


def build_site(spec, k, reference, n, rng, sources):
    """A :class:`Site` from its spec, on ``reference`` (b2k or BP), with ``n`` draws."""
    site_ref = spec.age_reference or reference
    if spec.record is not None:
        return _marker_site(spec, k, site_ref, reference, n, rng, sources)
    a, b = _affine(site_ref, reference)
    common = dict(label=spec.label, source="tabulated", independent=spec.independent,
                  chronology=spec.chronology, converted=_conversion(site_ref, reference))
    try:
        convert_age(spec.age if spec.age is not None else 2000.0, site_ref, reference)
    except InputError as exc:
        raise _located_error(exc, spec.label, k, "age") from None
    if spec.sd is not None:
        sd = abs(a) * spec.sd
        shared = abs(a) * (spec.shared_sd or 0.0)
        own_sd = np.sqrt(sd ** 2 - shared ** 2)
        unit = "ka" if site_ref.startswith("ka ") else "yr"
        return Site(**common, distribution=f"Gaussian (age {spec.age:g} {site_ref}, sd "
                    f"{spec.sd:g} {unit})", mean=a * spec.age + b,
                    own=own_sd * rng.standard_normal(n),
                    own_var=own_sd ** 2, shared_sd=shared, gaussian=True,
                    shared_given=spec.shared_sd is not None)
    if spec.draws is not None:
        values = (sources.draws(spec.draws, spec.label, k) if isinstance(spec.draws, str)
                  else check_draws(spec.draws, spec.label, k))
        values = a * values + b
        pick = values[rng.choice(values.size, n, replace=values.size < n)]
        name = spec.draws if isinstance(spec.draws, str) else "inline"
        return _scaled(Site(**common, distribution=f"{values.size} age draws ({name})",
                            mean=float(values.mean()), own=pick - values.mean(),
                            own_var=float(values.var()), shared_sd=0.0), spec, a, k)
    sd_lo, sd_hi = (spec.age - spec.lower) / Z95, (spec.upper - spec.age) / Z95
    draws = split_normal_draws(spec.age, sd_lo, sd_hi, n, rng)
    mean, var = split_normal_moments(spec.age, sd_lo, sd_hi)
    return _scaled(Site(**common, distribution=f"split normal (mode {spec.age:g}, 95 %: "
                        f"{spec.lower:g} to {spec.upper:g} {site_ref})", mean=a * mean + b,
                        own=a * (draws - mean), own_var=a * a * var, shared_sd=0.0), spec, a, k)


def _scaled(site, spec, a, k):
    """Give a non-Gaussian site its shared part: the own draws shrink so the total holds."""
    shared = abs(a) * (spec.shared_sd or 0.0)
    if shared ** 2 > site.own_var:
        raise InputError(f"site {site.label!r}: shared_sd exceeds the site's sd "
                         f"({np.sqrt(site.own_var):.3g} yr)", field=f"sites.{k}.shared_sd")
    site.shared_given = spec.shared_sd is not None
    return _with_shared(site, shared)


def _with_shared(site, shared):
    total = site.own_var + site.shared_sd ** 2
    factor = np.sqrt(max(total - shared ** 2, 0.0) / site.own_var) if site.own_var else 0.0
    site.own = site.own * factor
    site.own_var = total - shared ** 2
    site.shared_sd = shared
    return site


def split_normal_draws(mode, sd_lo, sd_hi, n, rng):
    """Draws of a split normal: half-Gaussians of sd ``sd_lo`` below and ``sd_hi`` above the
    mode, weighted ``sd_lo : sd_hi`` so that the density is continuous at the mode."""
    below = rng.random(n) < sd_lo / (sd_lo + sd_hi)
    half = np.abs(rng.standard_normal(n))
    return np.where(below, mode - sd_lo * half, mode + sd_hi * half)


def split_normal_moments(mode, sd_lo, sd_hi):
    """Mean and variance of the split normal.

    Notes
    -----
    ``mean = mode + sqrt(2/pi) (s2 - s1)``, ``var = (1 - 2/pi)(s2 - s1)^2 + s1 s2``
    (standard results for the two-piece normal; checked against draws in the tests).
    """
    mean = mode + np.sqrt(2.0 / np.pi) * (sd_hi - sd_lo)
    var = (1.0 - 2.0 / np.pi) * (sd_hi - sd_lo) ** 2 + sd_lo * sd_hi
    return float(mean), float(var)


def _marker_site(spec, k, site_ref, reference, n, rng, sources):
    """A site on a record: the marker kind's own uncertainty (its ``parts``) around its
    ``center``, plus the record's absolute timescale sd there as the chronology's error."""
    from align.detect import detect_marker
    from align.markers import kind_of
    from align.record import age_sigma, uncertainty_kind, with_age_reference

    kind = kind_of(spec.kind)
    fields = set(kind.options.model_fields) | {"kind", "variable", "window"}
    options = {f: v for f, v in spec.model_dump().items() if f in fields and v is not None}
    try:
        record = with_age_reference(sources.record(spec), site_ref)
        marker = detect_marker(record, options, seed=int(rng.integers(2**63)))
        kind.usable(marker, f"sites.{k}")
    except InputError as exc:
        raise _located_error(exc, spec.label, k, (exc.field or "record").split(".")[-1]) \
            from None
    centre = kind.center(marker)
    own = sum(part.draws for part in kind.parts(marker, spec.label, 1.0, n, rng))
    sigma = age_sigma(record)
    shared = 0.0 if sigma is None else float(np.interp(centre, record["age"].values, sigma))
    how = kind.describe(marker)
    errors = uncertainty_kind(record)
    how += (f", plus its timescale's absolute error ({errors})" if errors != "none"
            else "; its record carries no timescale error")
    a, b = _affine(site_ref, reference)
    return Site(label=spec.label, source="record", distribution=how,
                independent=spec.independent, chronology=spec.chronology
                or record.attrs.get("timescale") or None, mean=a * centre + b,
                converted=_conversion(site_ref, reference),
                own=a * own, own_var=float(np.var(own)), shared_sd=shared)


def default_shared(sites):
    """Sites on one chronology without a given shared sd: half the smallest variance among
    the chronology's sites is taken as shared (returns the assumptions this adds)."""
    notes = []
    groups = {}
    for site in sites:
        if site.chronology:
            groups.setdefault(site.chronology, []).append(site)
    for name, members in groups.items():
        if len(members) < 2:
            continue
        open_ = [s for s in members if s.source == "tabulated" and not s.shared_given]
        if not open_:
            continue
        smallest = min(s.own_var + s.shared_sd ** 2 for s in members)
        shared = float(np.sqrt(0.5 * smallest))
        for site in open_:
            _with_shared(site, shared)
        notes.append(f"Chronology {name!r}: no shared_sd given for "
                     f"{', '.join(s.label for s in open_)}; half the smallest variance among "
                     f"its sites is taken as shared (sd {shared:.3g} yr). Give shared_sd to "
                     "set it.")
    return notes


def _check_separable(sites):
    """Two sites whose whole error is their chronology's could never differ: refused."""
    whole = {}
    for k, site in enumerate(sites):
        if site.own_var <= 1e-9 * (site.own_var + site.shared_sd ** 2):
            whole.setdefault(site.key, []).append((k, site.label))
    for key, members in whole.items():
        if len(members) > 1:
            k, label = members[1]
            raise InputError(f"site {label!r}: it and {members[0][1]!r} carry only the error "
                             f"of chronology {key!r} (shared_sd equal to sd), so their dates "
                             "could never differ; give each its own error",
                             field=f"sites.{k}.shared_sd")


def covariance(sites):
    """The sites' covariance (yr^2): own variances on the diagonal plus the shared errors
    (``shared_i * shared_j`` for sites on one chronology)."""
    keys = [s.key for s in sites]
    shared = np.array([s.shared_sd for s in sites])
    same = np.equal.outer(np.array(keys, dtype=object), np.array(keys, dtype=object))
    return np.diag([s.own_var for s in sites]) + same * np.outer(shared, shared)


def joint_draws(sites, rng):
    """Draws of all sites' ages (n, K): own draws plus one shared draw per chronology."""
    n = sites[0].own.size
    keys = sorted({s.key for s in sites})
    z = dict(zip(keys, rng.standard_normal((len(keys), n))))
    return np.stack([s.mean + s.own + s.shared_sd * z[s.key] for s in sites], axis=1)


def near_gaussian(site, column):
    """Is the site's age distribution close to a Gaussian? (moments of its draws)"""
    if site.gaussian is not None:
        return site.gaussian
    d = column - column.mean()
    sd = d.std()
    skew = float(np.mean(d ** 3) / sd ** 3)
    kurt = float(np.mean(d ** 4) / sd ** 4 - 3.0)
    return abs(skew) < GAUSSIAN_SKEW and abs(kurt) < GAUSSIAN_KURTOSIS


# --------------------------------------------------------------------------------------------
# the analysis of one set of sites


@dataclass
class Analysis:
    """Test, combined age and spread of one choice of sites."""

    labels: list
    statistic: float
    dof: int
    p_value: float
    calibration: str
    combined: np.ndarray
    tau2: float
    tau2_ci: tuple | None  # None: the Q-profile interval is empty
    null_draws: int | None  # draws of the Monte Carlo calibration (None: chi-square)

    @property
    def consistent(self):
        return self.p_value >= LEVEL

    def p_text(self):
        """The p-value in words: ``p < 1/(n+1)`` at the floor of a Monte Carlo calibration
        with ``n`` draws (the assumptions say why), never ``1/(n+1)`` as if exact."""
        from align.xcorr import p_value_words

        if self.null_draws is None:
            return f"p = {self.p_value:.3g}"
        return p_value_words(self.p_value, self.null_draws, why=False)

    @property
    def could_differ_by(self):
        """Two sites' true ages differ by less than this in 95 % of pairs when the spread is
        at the upper end of its 95 % interval (yr); None when that interval is empty (the
        dates agree more closely than their errors predict)."""
        return None if self.tau2_ci is None else float(Z95 * np.sqrt(2.0 * self.tau2_ci[1]))


def analyse(x, cov, joint, gaussian, labels):
    """Test, combined-age draws and spread of the sites ``labels``."""
    from scipy.stats import chi2

    statistic = float(chi2_statistic(x, cov))
    dof = len(x) - 1
    if all(gaussian):
        p, calibration = float(chi2.sf(statistic, dof)), "chi-square"
    else:
        errors = -(joint - joint.mean(axis=0))  # reflected: observation minus truth
        p, calibration = mc_p_value(statistic, cov, errors), "Monte Carlo"
    _, _, weights = gls(x, cov)
    tau2_ci = q_profile(x, cov)
    return Analysis(labels=list(labels), statistic=statistic, dof=dof, p_value=p,
                    calibration=calibration, combined=joint @ weights,
                    tau2=float(dl_tau2(x, cov)), tau2_ci=tau2_ci if tau2_ci[1] > 0 else None,
                    null_draws=None if calibration == "chi-square" else joint.shape[0])


def _subset(sites, x, cov, joint, gaussian, keep):
    keep = list(keep)
    return analyse(x[keep], cov[np.ix_(keep, keep)], joint[:, keep],
                   [gaussian[i] for i in keep], [sites[i].label for i in keep])


# --------------------------------------------------------------------------------------------
# the entry point


class Sources:
    """The records and draws files a site list names (paths as given: a site file's are
    resolved by :func:`align.sites.read_sites`). ``records`` finds records (the HTTP service
    passes its store's)."""

    def __init__(self, records=None):
        from align.lag import Sources as RecordSources

        self.records = records or RecordSources()
        self.inputs = []

    def record(self, spec):
        from align.provenance import record_input

        record = self.records.record(spec)
        self.inputs.append(record_input(record, f"site {spec.label}"))
        return record

    def draws(self, name, label, k):
        from align.provenance import sha256_file

        values = read_draws(self.records.path(name), label, k)
        self.inputs.append({"role": f"site {label}", "source": str(name),
                            "sha256": sha256_file(self.records.path(name)), "timescale": ""})
        return values


def synchrony_request(sites, **options):
    """A checked :class:`SynchronyRequest` from a request (object or dict) or a list of site
    dicts. The request's own values come first; ``options`` fill what it leaves out."""
    from align.schema import SynchronyRequest

    if isinstance(sites, (str, Path)):
        raise InputError("test_synchrony takes a request or a list of sites, not a file; read "
                         "the file with align.sites.read_sites", source=str(sites),
                         field="sites")
    if isinstance(sites, SynchronyRequest):
        sites = sites.model_dump(exclude_unset=True)
    elif isinstance(sites, (list, tuple)):
        sites = {"sites": list(sites)}
    elif not isinstance(sites, dict):
        raise InputError("sites are a file, a request or a list of sites", field="sites")
    body = dict(sites)
    for key, value in options.items():
        if value is not None:
            body.setdefault(key, value)
    return sites_request(body)


def test_synchrony(sites, *, age_reference=DEFAULT_AGE_REFERENCE, draws=DEFAULT_LAG_DRAWS,
                   seed=None, outlier_prior=DEFAULT_OUTLIER_PRIOR, sources=None):
    """Is one horizon the same age at many sites?

    Parameters
    ----------
    sites : SynchronyRequest, dict or list of site dicts
        A request (read a JSON or CSV site file with :func:`align.sites.read_sites`), or the
        sites themselves. A site is a marker on a record (``kind``, ``record``, ``variable``,
        ``window``), or a tabulated date: ``age`` and ``sd`` (Gaussian), ``age`` with a 95 %
        interval ``lower``/``upper`` (split normal, see Notes), or ``draws`` (a one-column
        file of age draws). Each has ``age_reference``, an optional ``chronology`` (with
        ``shared_sd``, the chronology's part of its sd) and ``independent``.
    age_reference : {"b2k", "BP"}
        The common reference of the results.
    draws : int
        Monte Carlo draws per site.
    seed : int, optional
        Drawn and recorded when None.
    outlier_prior : float
        Prior probability that a site is shifted (outlier model).
    sources : Sources, optional
        Where records and draws files come from (the HTTP service passes its store).

    Returns
    -------
    SynchronyResult
        Per-site ages (yr), the test (statistic, dof, p-value), the combined age (yr; labelled
        "not supported" when the test fails), the spread (yr), outlier probabilities,
        leave-one-out rows, what-if rows (machine ``key`` and words), the verdict, cautions,
        assumptions and provenance.

    Notes
    -----
    The request's own values take precedence over these keywords, which fill what it leaves
    out.

    A 95 % interval ``[lower, upper]`` around ``age`` becomes a split normal: a half-Gaussian
    of sd ``(age - lower)/1.96`` below the age and one of sd ``(upper - age)/1.96`` above it,
    joined continuously at the age (its mode). It is the simplest distribution with the
    stated mode whose 95 % highest-density interval is exactly ``[lower, upper]`` (the two
    ends have equal density), which is how asymmetric age-model intervals are usually
    reported; its mean lies on the wide side.

    Sites on one chronology share its error: ``age_i = true + shared_i z_c + own_i`` with one
    ``z_c ~ N(0, 1)`` per chronology, so ``cov_ij = shared_i shared_j``. A marker site's
    shared part is its record's absolute timescale sd at the marker, and its chronology is the
    record's ``timescale`` unless given.
    """
    from align.provenance import provenance, resolve_seed

    request = synchrony_request(sites, age_reference=age_reference, draws=draws, seed=seed,
                                outlier_prior=outlier_prior)
    sources = sources or Sources()
    seed = resolve_seed(request.seed)
    request = request.model_copy(update={"seed": seed})
    streams = np.random.SeedSequence(seed).spawn(len(request.sites) + 2)
    built = [build_site(spec, k, request.age_reference, request.draws,
                        np.random.default_rng(streams[k]), sources)
             for k, spec in enumerate(request.sites)]
    notes = default_shared(built)
    _check_separable(built)
    joint = joint_draws(built, np.random.default_rng(streams[-2]))
    prov = provenance(inputs=sources.inputs, parameters=request.model_dump(exclude={"seed"}),
                      seed=seed)
    return _result(request, built, joint, np.random.default_rng(streams[-1]), notes, prov)


test_synchrony.__test__ = False  # not a pytest test, despite its name


def combined_age_draws(sites, *, allow_inconsistent=False, **options):
    """Draws of the combined (common) age of sites, for use as a marker.

    Parameters
    ----------
    sites
        As for :func:`test_synchrony`.
    allow_inconsistent : bool
        Return the draws even when the sites are not consistent with one common age.
    **options
        Keywords of :func:`test_synchrony`.

    Returns
    -------
    draws : numpy.ndarray
        The combined age's draws (yr, in the result's ``age_reference``).
    result : SynchronyResult
        The full analysis (its verdict and assumptions belong in any report that uses the
        draws).

    Raises
    ------
    InputError
        When the sites are not consistent (p below 0.05) and ``allow_inconsistent`` is false.
    """
    result = test_synchrony(sites, **options)
    if not result.test.consistent and not allow_inconsistent:
        raise InputError(f"the sites' dates are not consistent with one common age (p = "
                         f"{result.test.p_value:.3g}): a combined age is not supported "
                         "(allow_inconsistent uses it anyway)", field="sites")
    return result._combined_draws, result


# --------------------------------------------------------------------------------------------
# the result


def _result(request, sites, joint, rng, notes, prov):
    from align.detect import estimate
    from align.schema import (CombinedAge, ConsistencyTest, SiteResult, SiteSpread,
                              SynchronyResult)

    cov = covariance(sites)
    x = np.array([s.mean for s in sites])
    gaussian = [near_gaussian(s, joint[:, k]) for k, s in enumerate(sites)]
    used = [k for k, s in enumerate(sites) if s.independent]
    main = _subset(sites, x, cov, joint, gaussian, used)
    sub_cov = cov[np.ix_(used, used)]
    probs = (outlier_probabilities(x[used], sub_cov, request.outlier_prior, rng=rng,
                                   sweeps=600).tolist()
             if len(used) >= MIN_OUTLIER_SITES else [])
    prob_of = dict(zip([sites[k].label for k in used], probs))
    top = max(prob_of, key=prob_of.get) if prob_of else None
    rows = [SiteResult(label=s.label, source=s.source, distribution=s.distribution,
                       age=estimate(joint[:, k]), mean=float(s.mean),
                       shared_sd=float(s.shared_sd), near_gaussian=bool(gaussian[k]),
                       chronology=s.chronology, independent=s.independent,
                       outlier_probability=prob_of.get(s.label),
                       note=None if s.independent else
                       "not independent: its chronology was tied to or tuned on this event; "
                       "shown, never counted")
            for k, s in enumerate(sites)]
    combined = estimate(main.combined)
    supported = main.consistent
    label = ("supported: the dates are consistent with one common age" if supported else
             "not supported: the dates are not consistent with one common age")
    spread = SiteSpread(
        tau=float(np.sqrt(main.tau2)), tau2=main.tau2,
        ci95=None if main.tau2_ci is None else [float(np.sqrt(b)) for b in main.tau2_ci],
        could_differ_by=main.could_differ_by, statement=differ_words(main.could_differ_by))
    loo = _leave_one_out(sites, x, cov, joint, gaussian, used, main, combined)
    what_if = _what_ifs(sites, x, cov, joint, gaussian, used, top)
    result = SynchronyResult(
        request=request, sites=rows, n_independent=len(used),
        test=ConsistencyTest(statistic=main.statistic, dof=main.dof, p_value=main.p_value,
                             p_value_text=main.p_text(), level=LEVEL,
                             consistent=main.consistent,
                             calibration=main.calibration),
        combined=CombinedAge(age=combined, supported=supported, label=label), spread=spread,
        top_outlier=top, leave_one_out=loo, what_if=what_if,
        verdict=_verdict(request, sites, main, combined, prob_of, top, what_if),
        cautions=list(CAUTIONS),
        assumptions=_assumptions(sites, main, notes, request),
        references=["ward1978", "dersimonian1986", "viechtbauer2007", "christen1994"],
        age_reference=request.age_reference, provenance=prov)
    result._combined_draws = main.combined
    return result


def _leave_one_out(sites, x, cov, joint, gaussian, used, main, combined):
    from align.detect import estimate
    from align.schema import LeaveOneOut

    if len(used) < 3:
        return []
    half_width = 0.5 * (combined.ci95[1] - combined.ci95[0])
    rows = []
    for k in used:
        other = _subset(sites, x, cov, joint, gaussian, [j for j in used if j != k])
        without = estimate(other.combined)
        shift = without.median - combined.median
        flips = other.consistent != main.consistent
        moves = abs(shift) > half_width
        reason = ("removing it flips the verdict" if flips else
                  "removing it moves the combined age by more than half its 95 % width"
                  if moves else None)
        rows.append(LeaveOneOut(label=sites[k].label, p_value=other.p_value,
                                p_value_text=other.p_text(),
                                consistent=other.consistent, combined=without,
                                shift=float(shift), decisive=flips or moves, reason=reason))
    return rows


def _what_ifs(sites, x, cov, joint, gaussian, used, top):
    from align.detect import estimate
    from align.schema import SynchronyWhatIf

    keys = [sites[k].key for k in used]
    shared = {key for key in keys if keys.count(key) > 1}
    unshared = [k for k in used if sites[k].key not in shared]
    once = list(unshared)
    for key in sorted(shared):
        members = [k for k in used if sites[k].key == key]
        once.append(min(members, key=lambda k: cov[k, k]))
    choices = [
        ("without_top_outlier", f"without the most probable outlier ({top or 'none'})",
         [k for k in used if sites[k].label != top], None if top else TWO_SITES),
        ("independent_chronologies_only", "only sites whose chronology no other site shares",
         unshared, None if shared else "no two sites share a chronology"),
        ("each_chronology_once", "each chronology counted once (its most precise site)",
         sorted(once), None if shared else "no two sites share a chronology")]
    rows = []
    for key, change, keep, same in choices:
        labels = [sites[k].label for k in keep]
        if same is not None or len(keep) < 2:
            rows.append(SynchronyWhatIf(key=key, change=change, applicable=False, sites=labels,
                                        note=same or "fewer than two sites would remain"))
            continue
        other = _subset(sites, x, cov, joint, gaussian, keep)
        rows.append(SynchronyWhatIf(key=key, change=change, applicable=True, sites=labels,
                                    p_value=other.p_value, p_value_text=other.p_text(),
                                    consistent=other.consistent,
                                    combined=estimate(other.combined),
                                    could_differ_by=other.could_differ_by))
    return rows


def differ_words(could_differ_by):
    """How far the sites' true ages could differ, in words (``None``: the spread's 95 %
    interval is empty)."""
    if could_differ_by is None:
        return ("the dates agree more closely than their errors predict (the spread's 95 % "
                "interval is empty), so the data give no bound on how far the true ages could "
                "differ; the errors may be overstated, or the dates not independent")
    years = ("less than 1 year" if could_differ_by < 1 else
             f"{could_differ_by:,.0f} years")
    return f"the true ages could differ by up to {years} (95 %)"


def _age_text(estimate, reference):
    lo, hi = estimate.ci95
    return f"{estimate.median:,.0f} {reference} (95 %: {lo:,.0f}-{hi:,.0f})"


def _verdict(request, sites, main, combined, probs, top, what_if):
    ref = request.age_reference
    n = len(main.labels)
    p = main.p_text()
    if main.consistent:
        text = (f"{n} independent sites; their dates are consistent with one common age "
                f"({p}): {_age_text(combined, ref)}, and "
                f"{differ_words(main.could_differ_by)}.")
        if top is not None and probs[top] > 0.5:
            text += (f" Site {top} is nevertheless a probable outlier (outlier probability "
                     f"{probs[top]:.2f}).")
    else:
        text = (f"{n} independent sites; their dates are not consistent with one common age "
                f"({p}). ")
        row = next(w for w in what_if if w.key == "without_top_outlier")
        if top is None:
            text += TWO_SITES[0].upper() + TWO_SITES[1:] + "."
        else:
            chosen = "; the site was chosen after seeing the dates, so this overstates agreement"
            text += (f"Site {top} is the most probable outlier (outlier probability "
                     f"{probs[top]:.2f}); without it the other {len(row.sites)} " + (
                         f"agree ({row.p_value_text}{chosen}) on "
                         f"{_age_text(row.combined, ref)}, and "
                         f"{differ_words(row.could_differ_by)}." if row.consistent else
                         f"still disagree ({row.p_value_text})."))
        text += (f" A combined age is not supported (computed anyway: "
                 f"{_age_text(combined, ref)}).")
    for site in sites:
        if not site.independent:
            text += (f" Site {site.label} is not independent (its chronology was tied to "
                     "this event) and is not counted.")
    return text


def _assumptions(sites, main, notes, request):
    from align.ages import reference_label

    ref = request.age_reference
    out = [f"Ages are {reference_label(ref)}, growing into the past; sds and intervals are in "
           "years."]
    converted = [f"{s.label} {s.converted}" for s in sites if s.converted]
    if converted:
        out.append(f"Converted to {ref} exactly before any comparison: "
                   f"{'; '.join(converted)}.")
    out += [f"The test asks whether the {len(main.labels)} independent sites share one common "
           "age (generalised chi-square of Ward & Wilson 1978 with the full covariance, "
           f"{main.dof} degrees of freedom, at the 5 % level)."]
    if main.calibration == "Monte Carlo":
        odd = [s.label for s in sites if s.independent and s.label in main.labels
               and s.gaussian is not True]
        out.append("Some sites are far from Gaussian, so the statistic's null distribution "
                   "is calibrated by Monte Carlo from the sites' own draws "
                   f"(considered: {', '.join(odd)}); when none of its {main.null_draws} draws "
                   "reaches the observed statistic the p-value is only known to lie below "
                   f"1/{main.null_draws + 1} and reads 'p < 1/{main.null_draws + 1}'. The "
                   "spread's interval still uses chi-square quantiles.")
    out.append("The combined age is the generalised least-squares mean, its distribution "
               "the same weights applied to the sites' joint draws.")
    shared = sorted({s.chronology for s in sites if s.chronology
                     and sum(t.chronology == s.chronology for t in sites) > 1})
    if shared:
        out.append("Sites on one chronology share its error (correlated in the test, the "
                   f"combined age and the outlier model): {', '.join(shared)}.")
    out += notes
    if any(s.source == "record" for s in sites):
        out.append("A marker site's age carries its detection uncertainty and its record's "
                   "absolute timescale error (sites are compared on absolute ages).")
    if any("split normal" in s.distribution for s in sites):
        out.append("A 95 % interval is read as a split normal: two half-Gaussians joined at "
                   "the stated age, so that the interval is its 95 % highest-density region.")
    out.append("The spread is the between-site sd of the true ages (DerSimonian & Laird "
               "1986, generalised to the covariance) with a Q-profile 95 % interval "
               "(Viechtbauer 2007); 'could differ by' is 1.96 sqrt(2) times its upper bound. "
               "When the statistic lies below its 2.5 % point the interval is empty: the dates "
               "agree more closely than their errors predict and no bound is given.")
    if len(main.labels) < MIN_OUTLIER_SITES:
        out.append(f"Outlier probabilities are not computed: {TWO_SITES}.")
    else:
        out.append("Outlier probabilities: each site is, with prior probability "
                   f"{request.outlier_prior:g}, shifted from the common age (Christen 1994); "
                   f"the shift's prior sd is {SHIFT_SCALE:g} times the site's own sd (our "
                   "choice); Gibbs sampling with the sites' Gaussian approximations.")
    out.append("A leave-one-out site is decisive when removing it flips the verdict or moves "
               "the combined age by more than half its 95 % width.")
    out.append("The leave-one-out and what-if p-values test sites chosen after seeing the "
               "dates (the most probable outlier above all), so they overstate agreement: "
               "they are not tests at the 5 % level.")
    return out
