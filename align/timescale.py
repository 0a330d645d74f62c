"""Timescale uncertainty: how age errors at different depths of one record are related.

A layer-counted timescale's maximum counting error (MCE) is large in absolute terms, but two
nearby depths share almost all of it: only the layers between them add to their relative
error. Two models are offered:

``correlated`` (default)
    The counting error is one systematic bias growing with depth: ``e(x) = z * MCE(x) / 2``
    with one standard normal ``z`` per core. The relative sd between two depths is
    ``|MCE(x2) - MCE(x1)| / 2``.
``random-walk``
    Independent errors of the uncertain layers themselves. The MCE counts every uncertain
    layer as 0.5 +- 0.5 yr and adds these maximum errors (Andersen et al. 2006), so a depth
    with maximum counting error ``MCE`` lies below ``2 MCE`` uncertain layers. Taken as
    independent, each is 0 or 1 yr with equal odds (sd :data:`LAYER_SD` = 0.5 yr), and the
    error is a random walk with variance ``2 MCE LAYER_SD^2 = MCE / 2`` (yr^2); the relative
    variance between two depths is ``|MCE(x2) - MCE(x1)| / 2``. Per year of ice the miscount
    sd is ``sqrt(dMCE/dn / 2)``: 0.16 yr over 11.7-59.4 ka on the published GICC05 profile
    (0.09-0.41 yr between neighbouring tabulated events; Rasmussen et al. 2014), a small
    fraction of a year. A walk whose accumulated sd equals ``MCE / 2`` would need
    ``sqrt(d(MCE/2)^2/dn)``: 5.9 yr of miscount per year of ice on that profile (1.4-20 yr
    between neighbouring events), which no layer count allows.

The MCE is taken as 2 sigma of the correlated model (Andersen et al. 2006; by common practice,
e.g. Walker et al. 2008, who quote the 99-year MCE at the base of the Holocene as a 2-sigma
uncertainty).

Modelled timescales with only an ``age_sd`` have errors correlated over an age scale ``L``:
``corr = exp(-|age1 - age2| / L)`` (:func:`sd_covariance`; the relative variance of two
nearby depths grows as ``2 sd^2 |age1 - age2| / L``, like an accumulation-rate error between
dated levels); ``L`` infinite is one shift of the whole core, ``L = 0`` independent depths. An
``age_ensemble`` overrides this with the age model's own correlation, used member by member.

References
----------
Andersen, K. K. et al. (2006), Quat. Sci. Rev. 25, 3246-3257,
doi:10.1016/j.quascirev.2006.08.002.
Rasmussen, S. O. et al. (2014), Quat. Sci. Rev. 106, 14-28,
doi:10.1016/j.quascirev.2014.09.007.
Walker, M. et al. (2008), J. Quat. Sci. 24, 3-17, doi:10.1002/jqs.1227.
"""

from __future__ import annotations

import dask.array as da
import numpy as np
import xarray as xr
from scipy.stats import truncnorm

from align.choices import (
    DEFAULT_AGE_ERROR_SCALE,
    DEFAULT_TIMESCALE_MODEL,
    TimescaleModel,
    check_choice,
)
from align.errors import InputError
from align.provenance import resolve_seed
from align.record import MEMBER, SAMPLE, uncertainty_kind

#: Error sd (yr) of one uncertain layer under the random-walk model: counted as 0.5 +- 0.5 yr
#: (Andersen et al. 2006), it is 0 or 1 yr with equal odds.
LAYER_SD = 0.5

#: Samples per independently seeded block of a lazily drawn ensemble (and per dask chunk):
#: about 33 MB per block at 1,000 members. The draws depend on the seed, not on the machine.
DRAW_BLOCK = 4096


def check_model(model):
    """Return ``model`` if it is a known layer-counting error model, else raise."""
    return check_choice(model, TimescaleModel, "timescale_model")


def mce_covariance(mce, model=DEFAULT_TIMESCALE_MODEL):
    """Covariance of layer-counting age errors at a set of depths.

    Parameters
    ----------
    mce : array_like
        Maximum counting error (yr) at each depth.
    model : {"correlated", "random-walk"}

    Returns
    -------
    numpy.ndarray (n, n)
        Covariance (yr^2). Correlated: ``s_i s_j`` with ``s = MCE / 2``; random walk:
        ``min(v_i, v_j)`` with ``v`` = :func:`walk_variance` (``MCE / 2`` yr^2).
    """
    check_model(model)
    mce = np.asarray(mce, dtype=float)
    if model == "correlated":
        return np.outer(mce / 2.0, mce / 2.0)
    v = walk_variance(mce)
    return np.minimum.outer(v, v)


def walk_variance(mce):
    """Variance (yr^2) of the random-walk counting error at a maximum counting error ``mce``.

    Notes
    -----
    ``2 MCE`` uncertain layers (each adds 0.5 yr to the MCE; Andersen et al. 2006,
    doi:10.1016/j.quascirev.2006.08.002), each an independent error of sd
    :data:`LAYER_SD`: ``v = 2 MCE LAYER_SD^2 = MCE / 2``.
    """
    return 2.0 * np.asarray(mce, dtype=float) * LAYER_SD**2


def layer_sd(mce, age):
    """Miscount sd (yr) per year of ice implied by the random-walk model along a profile.

    Parameters
    ----------
    mce, age : array_like
        A maximum-counting-error profile (yr) and its ages (yr), increasing.

    Returns
    -------
    numpy.ndarray (n - 1,)
        ``sqrt(dv/dn)`` between neighbouring points (``v`` = :func:`walk_variance`, ``n``
        years counted), i.e. ``sqrt(dMCE/dn / 2)``.
    """
    dv = np.diff(walk_variance(mce))
    return np.sqrt(np.clip(dv, 0.0, None) / np.diff(np.asarray(age, dtype=float)))


def relative_sd(mce1, mce2, model=DEFAULT_TIMESCALE_MODEL):
    """Relative age sd (yr) between two depths of one layer-counted core.

    Notes
    -----
    Correlated: ``|MCE2 - MCE1| / 2``; random walk: ``sqrt(|MCE2 - MCE1| / 2)``.
    """
    cov = mce_covariance([mce1, mce2], model)
    return float(np.sqrt(max(cov[0, 0] + cov[1, 1] - 2 * cov[0, 1], 0.0)))


def sd_covariance(sd, ages, scale):
    """Covariance (yr^2) of modelled-timescale errors with sds ``sd`` (yr) at ``ages`` (yr).

    Parameters
    ----------
    sd : array_like (n,)
        Error sds (yr) at the ages.
    ages : array_like (n,)
        Positions on the timescale (yr).
    scale : float
        Age scale (yr) of the correlation; 0: independent depths, ``inf``: one shared error.

    Returns
    -------
    numpy.ndarray (n, n)
        yr^2.

    Notes
    -----
    ``C_ij = sd_i sd_j exp(-|age_i - age_j| / scale)``: the exponential (Ornstein-Uhlenbeck)
    correlation (the Matern class with nu = 1/2), positive definite for every ``scale > 0``
    (Rasmussen & Williams 2006, Gaussian Processes for Machine Learning, section 4.2, MIT
    Press, ISBN 0-262-18253-X). ``scale = 0``
    gives independent depths, ``scale = inf`` one shared error.
    """
    sd = np.asarray(sd, dtype=float)
    gap = np.abs(np.subtract.outer(np.asarray(ages, dtype=float), ages))
    with np.errstate(divide="ignore", invalid="ignore"):
        corr = np.exp(-gap / scale) if scale > 0 else (gap == 0).astype(float)
    return np.outer(sd, sd) * np.where(gap == 0, 1.0, corr)


def error_covariance(record, ages, model=DEFAULT_TIMESCALE_MODEL,
                     scale=DEFAULT_AGE_ERROR_SCALE):
    """Covariance of a record's timescale errors at the given ages.

    Parameters
    ----------
    record : xarray.Dataset
        A record with an age coordinate and an uncertainty.
    ages : array_like
        Positions on the record's timescale (yr).
    model : {"correlated", "random-walk"}
        For layer-counted records (``age_mce``).
    scale : float
        For sd-only records: the age scale (yr) of their errors' correlation (0: independent
        depths; ``inf``: one shared error); default that of a lag request.

    Returns
    -------
    numpy.ndarray (n, n)
        yr^2. MCE records: :func:`mce_covariance`; ensembles: the members' covariance;
        sd-only records: :func:`sd_covariance`; none: zeros.
    """
    ages = np.atleast_1d(np.asarray(ages, dtype=float))
    kind = uncertainty_kind(record)
    axis = record["age"].values
    if kind == "mce":
        return mce_covariance(np.interp(ages, axis, record["age_mce"].values), model)
    if "age_ensemble" in record:
        members = ensemble_at(record, ages)
        return np.atleast_2d(np.cov(members, rowvar=False))
    if kind == "sd":
        return sd_covariance(np.interp(ages, axis, record["age_sd"].values), ages, scale)
    return np.zeros((ages.size, ages.size))


def ensemble_at(record, ages):
    """Ensemble ages at positions given on the record's median timescale.

    Returns
    -------
    numpy.ndarray (member, n)
        For each member, the age it assigns to the depth where the median timescale reads
        ``ages`` (linear between sample mid-points).
    """
    axis = record["age"].values
    ens = record["age_ensemble"].transpose(SAMPLE, MEMBER).values
    idx = np.clip(np.searchsorted(axis, ages) - 1, 0, axis.size - 2)
    w = np.clip((ages - axis[idx]) / (axis[idx + 1] - axis[idx]), 0.0, 1.0)
    return (ens[idx] * (1 - w)[:, None] + ens[idx + 1] * w[:, None]).T


# --------------------------------------------------------------------------------------------
# ensembles


def age_ensemble(record, members=1000, *, seed=None, model=DEFAULT_TIMESCALE_MODEL):
    """Age realisations of a record, every one monotonic down-core.

    Parameters
    ----------
    record : xarray.Dataset
        Layer-counted (``age_mce``), transferred (``age_sd_reference``/``_tie``/``_bridge``) or
        a record that already carries ``age_ensemble`` (returned as it is).
    members : int
        Number of realisations.
    seed : int, optional
        Seed; drawn and recorded in the attributes when None.
    model : {"correlated", "random-walk"}
        Layer-counting error model (see module notes).

    Returns
    -------
    xarray.DataArray (sample, member)
        Ages in yr (the record's reference), dask-backed in blocks of :data:`DRAW_BLOCK`
        samples: large ensembles never sit in memory whole if reduced (``.quantile``,
        ``.std``) before ``.compute()``.

    Notes
    -----
    Layer-counted, correlated: ``age + z_m MCE / 2`` with ``z_m`` standard normal truncated to
    the range that keeps every member monotonic. Random walk: cumulative sums of independent
    gamma increments with the mean of each sample step and variance ``Delta(MCE) / 2``
    (:func:`walk_variance`), so that no layer interval becomes negative. Transferred: the
    tie, bridge and reference parts are drawn separately: tie offsets (normal, sd of each
    tie) interpolated linearly, the reference part with the reference's own model
    (correlated by default), and the bridge as a gamma (Dirichlet) bridge between
    neighbouring sample ages whose variance equals the Brownian-bridge variance of
    :func:`align.ties.bridge_variance` and which keeps every member monotonic.
    """
    check_model(model)
    if members < 1:
        raise InputError("members must be at least 1", field="members")
    if "age_ensemble" in record:
        return record["age_ensemble"].transpose(SAMPLE, MEMBER)
    seed = resolve_seed(seed)
    if record.attrs.get("timescale_kind") == "transferred":
        data = _transferred_members(record, members, seed)
    elif "age_mce" in record:
        data = _counted_members(record, members, seed, model)
    else:
        raise InputError("no ensemble can be drawn: the record has neither an MCE (layer-"
                         "counted) nor a transferred timescale, and carries no age_ensemble; "
                         "a modelled record's ensemble comes from its age model",
                         source=record.attrs.get("source"), field="age_ensemble")
    return xr.DataArray(data, dims=(SAMPLE, MEMBER), coords={"age": record["age"]},
                        name="age_ensemble",
                        attrs={"units": "yr", "long_name": "age ensemble member",
                               "seed": seed, "model": model})


def _counted_members(record, members, seed, model):
    age = record["age"].values
    sigma = record["age_mce"].values / 2.0
    rng = np.random.default_rng(seed)
    if model == "correlated":
        lo, hi = _z_range(np.diff(age), np.diff(sigma))
        z = truncnorm.rvs(lo, hi, size=members, random_state=rng)
        base = da.from_array(age, chunks=DRAW_BLOCK)[:, None]
        return base + da.from_array(sigma, chunks=DRAW_BLOCK)[:, None] * z[None, :]
    # random walk: the first sample's error, then independent gamma increments with the mean
    # of each sample step and variance Delta(v): exact moments, never a negative step
    v = walk_variance(record["age_mce"].values)
    first = rng.normal(0.0, np.sqrt(v[0]), members)
    var = np.maximum(np.diff(v), 0.0)
    step = np.diff(age)
    random = var > 0
    shape = np.where(random, step**2 / np.where(random, var, 1.0), 1.0)
    scale = np.where(random, var / step, 0.0)

    def pieces(block_rng, lo, hi):
        draws = block_rng.gamma(shape[lo:hi, None], scale[lo:hi, None], (hi - lo, members))
        return np.where(random[lo:hi, None], draws, step[lo:hi, None])

    walk = _cumulative(age.size - 1, members, seed, pieces)
    return da.concatenate([first[None, :], first[None, :] + walk], axis=0) + age[0]


def _z_range(step, dsigma):
    """Standard-normal range that keeps ``age + z sigma`` non-decreasing."""
    with np.errstate(divide="ignore", invalid="ignore"):
        bound = -step / dsigma
    lo = np.max(bound[dsigma > 0], initial=-np.inf)
    hi = np.min(bound[dsigma < 0], initial=np.inf)
    return max(lo, -8.0), min(hi, 8.0)


def _cumulative(n, members, seed, pieces, normalise=None):
    """Cumulative sums of random pieces, built lazily block by block.

    ``pieces(rng, lo, hi)`` draws pieces ``lo:hi`` (rows) for every member (columns) from a
    block-specific generator, so a block can be drawn twice with the same result: once to
    sum it, once to finish it. ``normalise``, when given, is the extra final piece's drawer
    ``normalise(rng) -> (members,)``; the cumulative sums are then divided by the grand total
    (a Dirichlet split). Returns a dask array (n, members).
    """
    from dask import delayed

    edges = list(range(0, n, DRAW_BLOCK)) + [n]
    spans = list(zip(edges[:-1], edges[1:]))
    root = seed if isinstance(seed, np.random.SeedSequence) else np.random.SeedSequence(seed)
    seeds = root.spawn(len(spans) + 1)
    block_sum = delayed(lambda s, lo, hi: pieces(np.random.default_rng(s), lo, hi).sum(axis=0))
    sums = [block_sum(seeds[b], lo, hi) for b, (lo, hi) in enumerate(spans)]
    total = delayed(lambda parts, last: np.sum(parts, axis=0) + last)(
        sums, delayed(normalise)(np.random.default_rng(seeds[-1])) if normalise else 0.0)

    def finish(s, lo, hi, before, grand):
        cum = np.sum(before, axis=0) + np.cumsum(pieces(np.random.default_rng(s), lo, hi),
                                                 axis=0)
        return cum / grand if normalise else cum

    blocks = [da.from_delayed(delayed(finish)(seeds[b], lo, hi, sums[:b] or [np.zeros(members)],
                                              total), shape=(hi - lo, members), dtype=float)
              for b, (lo, hi) in enumerate(spans)]
    return da.concatenate(blocks, axis=0) if blocks else da.zeros((0, members))


def _transferred_members(record, members, seed):
    """Tie + bridge + reference members of a transferred record (see :func:`age_ensemble`)."""
    age = record["age"].values
    attrs = record.attrs
    tie_age, tie_sd = (np.atleast_1d(np.asarray(attrs[k], dtype=float))
                       for k in ("tie_age", "tie_sd"))
    rate = float(attrs["bridge_rate"])
    seeds = np.random.SeedSequence(seed).spawn(2 + tie_age.size + 1)
    rng = np.random.default_rng(seeds[0])
    sigma = record["age_sd_reference"].values
    slope = np.abs(np.diff(sigma) / np.diff(age)).max(initial=0.0)
    limit = min(8.0, 0.9 / slope) if slope > 0 else 8.0
    z = truncnorm.rvs(-limit, limit, size=members, random_state=rng)
    # the ties' ages per member; crossing draws are put back in order (rare: only where tie
    # sds exceed their spacing)
    pins = np.sort(tie_age[:, None] + tie_sd[:, None] * rng.standard_normal(
        (tie_age.size, members)), axis=0)
    segment = np.searchsorted(tie_age, age, side="right")
    parts = []
    for s in range(tie_age.size + 1):
        idx = np.flatnonzero(segment == s)
        if idx.size:
            parts.append(_bridge_segment(age[idx], tie_age, pins, s, rate, members,
                                         seeds[2 + s]))
    # the reference timescale's error as a monotone map of each member's age:
    # x -> x + z sigma_ref(x), monotone because |z sigma_ref'| < 1
    return da.concatenate(parts, axis=0).map_blocks(
        lambda block: block + z[None, :] * np.interp(block, age, sigma), dtype=float)


def _bridge_segment(ages, tie_age, pins, s, rate, members, seed):
    """Member ages of the samples in segment ``s`` (between ties ``s-1`` and ``s``).

    Between ties ``x1 < x2`` (duration ``L``; per member the tie ages ``x1'``, ``x2'`` drawn
    from the tie errors) the sample ages split ``L`` into pieces ``d_j``; member positions
    are ``x1' + (x2' - x1') C_j / C`` with ``C_j`` the cumulative sum of
    ``g_j ~ Gamma(d_j (L / rate - 1) / L)`` (a Dirichlet split). The fraction ``p`` of the way
    then has variance ``rate L p (1 - p)`` -- the Brownian-bridge variance -- on top of the
    interpolated tie error, and every member is monotonic. Beyond the outer ties the pieces
    are ``Gamma(d_j / rate, rate)``: mean ``d_j``, variance ``rate d_j``, a free gamma process
    growing away from the outer tie.
    """
    inner = 0 < s < tie_age.size
    if inner:
        x1, x2 = tie_age[s - 1], tie_age[s]
        total = x2 - x1
        d = np.diff(np.concatenate([[x1], ages, [x2]]))
        if rate > 0:
            shape = np.maximum(d * max(total / rate - 1.0, 1e-3) / total, 1e-12)
            frac = _cumulative(ages.size, members, seed,
                               lambda rng, lo, hi: rng.gamma(shape[lo:hi, None], 1.0,
                                                             (hi - lo, members)),
                               normalise=lambda rng: rng.gamma(shape[-1], 1.0, members))
        else:
            frac = da.from_array(np.repeat(((ages - x1) / total)[:, None], members, axis=1),
                                 chunks=(DRAW_BLOCK, members))
        return pins[s - 1] + (pins[s] - pins[s - 1]) * frac
    before = s == 0
    anchor, pin = (tie_age[0], pins[0]) if before else (tie_age[-1], pins[-1])
    outward = ages[::-1] if before else ages
    d = np.abs(np.diff(np.concatenate([[anchor], outward])))
    if rate > 0:
        cum = _cumulative(ages.size, members, seed,
                          lambda rng, lo, hi: rng.gamma(np.maximum(d[lo:hi, None] / rate, 1e-12),
                                                        rate, (hi - lo, members)))
    else:
        cum = da.from_array(np.repeat(np.cumsum(d)[:, None], members, axis=1),
                            chunks=(DRAW_BLOCK, members))
    return (pin - cum)[::-1] if before else pin + cum
