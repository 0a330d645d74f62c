"""Cross-correlation: timing carried by a whole stretch of signal, with significance.

Sign convention as for marker lags: a positive lag ``L`` means the shared pattern appears
earlier (older) in ``a`` than in ``b``, i.e. ``a(age) ~ b(age - L)``.

Pearson method: both records are resampled onto one grid (:func:`align.resample.resample`,
the coarser native resolution by default) and ``r(k)`` is the sample cross-correlation of
``a_i`` with ``b_{i-k}`` with global means and sds and the number of valid pairs at each lag
as denominator (statsmodels' ``ccf(..., adjusted=True)``; Chatfield 2004, section 8.1),
computed for all lags and series at once by FFT. Kernel method: the Gaussian-kernel estimator
of Rehfeld et al. (2011) directly on the irregular samples.

References
----------
Rehfeld, K. et al. (2011), Nonlin. Processes Geophys. 18, 389-404,
doi:10.5194/npg-18-389-2011.
Ebisuzaki, W. (1997), J. Climate 10, 2147-2153,
doi:10.1175/1520-0442(1997)010<2147:AMTETS>2.0.CO;2.
Bretherton, C. S. et al. (1999), J. Climate 12, 1990-2009,
doi:10.1175/1520-0442(1999)012<1990:TENOSD>2.0.CO;2.
"""

from __future__ import annotations

import numpy as np
import scipy.fft as sfft

from align.choices import (DEFAULT_BOOTSTRAP, DEFAULT_CORRELATION_METHOD, DEFAULT_SURROGATE_KIND,
                           DEFAULT_SURROGATES, CorrelationMethod, SurrogateKind, check_choice)
from align.errors import InputError
from align.detect import check_proxy, check_window
from align import limits
from align.noise import lag1_autocorrelation, persistence_time, simulate_ar1
from align.provenance import provenance, record_input, resolve_seed
from align.record import age_reference as age_reference_of
from align.record import record_name, with_age_reference
from align.resample import resample
from align.schema import Curve, PeakLag, SurrogateInfo, XcorrResult


#: Gap-free series at least this many times longer than the lag range are correlated at their
#: own length with the wrap-around subtracted; shorter ones with zero padding (the cheaper).
CIRCULAR_LAGS = 5
#: Lags x grid points of block sums held at once by the block bootstrap.
BLOCK_SUM_VALUES = 4_000_000
#: Surrogates x grid points made and correlated at once by the surrogate test.
SURROGATE_VALUES = 4_000_000


# --------------------------------------------------------------------------------------------
# formulas


def ccf(a, b, max_lag):
    """Cross-correlation ``r(k)``, ``k = -max_lag..max_lag``, of series on one regular grid.

    Parameters
    ----------
    a, b : numpy.ndarray (..., n)
        Series (NaN: missing), one or a batch; the last axis is the grid.
    max_lag : int
        Largest lag in grid steps.

    Returns
    -------
    r : numpy.ndarray (..., 2 max_lag + 1)
        ``sum_i (a_i - abar)(b_{i-k} - bbar) / N_k / (s_a s_b)`` over the ``N_k`` pairs where
        both are valid, with means ``abar``, ``bbar`` and (population) sds over each series'
        valid values. For gap-free series and ``k >= 0`` this is statsmodels'
        ``ccf(a, b, adjusted=True)[k]``.
    pairs : numpy.ndarray (..., 2 max_lag + 1)
        ``N_k``.
    """
    a = np.asarray(a, dtype=float)
    b = np.asarray(b, dtype=float)
    n = a.shape[-1]
    lags = np.arange(-max_lag, max_lag + 1)
    if max_lag >= n:
        raise InputError("max_lag must be shorter than the series", field="max_lag")
    if np.isfinite(a.sum()) and np.isfinite(b.sum()):  # one pass each: no NaN, no inf
        if CIRCULAR_LAGS * max_lag <= n:
            sums = _circular_sums(a, b, max_lag)
        else:  # long lag ranges: the wrap correction would cost more than the padding
            sums = _padded_products(a - a.mean(axis=-1, keepdims=True),
                                    b - b.mean(axis=-1, keepdims=True), lags)
            sums /= a.std(axis=-1, keepdims=True) * b.std(axis=-1, keepdims=True)
        pairs = np.broadcast_to((n - np.abs(lags)).astype(float), sums.shape)
        return sums / pairs, pairs
    ma, mb = np.isfinite(a), np.isfinite(b)
    da = np.where(ma, a - _nanmean(a), 0.0) / _nanstd(a)
    db = np.where(mb, b - _nanmean(b), 0.0) / _nanstd(b)
    sums = _padded_products(da, db, lags)
    pairs = np.rint(_padded_products(ma.astype(float), mb.astype(float), lags))
    with np.errstate(invalid="ignore", divide="ignore"):
        return np.where(pairs > 0, sums / pairs, np.nan), pairs


def _padded_products(x, y, lags):
    """``sum_i x_i y_{i-k}`` at the given lags by an FFT padded with zeros against
    wrap-around."""
    size = sfft.next_fast_len(x.shape[-1] + int(np.abs(lags).max()), real=True)
    spectrum = sfft.rfft(x, size, workers=-1) * np.conj(sfft.rfft(y, size, workers=-1))
    return sfft.irfft(spectrum, size, workers=-1)[..., lags % size]


def _circular_sums(a, b, max_lag):
    """``sum_i za_i zb_{i-k}`` of standardised gap-free series, without zero padding.

    The FFT runs at the series' own length (a power of two stays one): the mean is removed by
    zeroing the zero-frequency bin, the sds come from Parseval's theorem, and the few
    products that a circular correlation wraps around the ends (``i < k`` for ``k > 0``) are
    subtracted: for every lag at once, they are the linear correlation of the first and last
    ``max_lag`` points (:func:`_end_products`).
    """
    n = a.shape[-1]
    fa = sfft.rfft(a, workers=-1)
    fb = sfft.rfft(b, workers=-1)
    mean_a, mean_b = fa[..., :1].real / n, fb[..., :1].real / n
    fa[..., 0] = 0.0
    fb[..., 0] = 0.0
    weight = np.full(fa.shape[-1], 2.0)
    weight[0] = 1.0
    if n % 2 == 0:
        weight[-1] = 1.0
    sd_a, sd_b = (np.sqrt(np.einsum("...j,...j,j->...", f.view(float), f.view(float),
                                    np.repeat(weight, 2)))[..., None] / n for f in (fa, fb))
    product = np.conjugate(fb, out=fb)
    if product.shape == np.broadcast_shapes(fa.shape, fb.shape):
        product *= fa
    else:
        product = product * fa
    circular = sfft.irfft(product, n, workers=-1)
    k = max_lag
    head_a, tail_a = a[..., :k] - mean_a, a[..., n - k:] - mean_a
    head_b, tail_b = b[..., :k] - mean_b, b[..., n - k:] - mean_b
    out = np.empty(circular.shape[:-1] + (2 * k + 1,))
    out[..., k] = circular[..., 0]
    # lag l > 0 wraps a[:l] onto b[n - l:]: sum_j head_a[j] tail_b[j + k - l], the linear
    # correlation of the two k-point ends at shift k - l (l < 0 the mirror), all at once
    lag = np.arange(1, k + 1)
    out[..., k + lag] = circular[..., lag] - _end_products(head_a, tail_b)[..., k - lag]
    out[..., k - lag] = circular[..., n - lag] - _end_products(head_b, tail_a)[..., k - lag]
    return out / (sd_a * sd_b)


def _end_products(x, y):
    """``r[m] = sum_j x[j] y[j + m]``, ``m = 0..k-1``, of k-point series (batched), by a
    zero-padded FFT: ``O(k log k)`` per series instead of ``O(k^2)``."""
    k = x.shape[-1]
    size = sfft.next_fast_len(2 * k, real=True)
    return sfft.irfft(np.conj(sfft.rfft(x, size, workers=-1)) * sfft.rfft(y, size, workers=-1),
                      size, workers=-1)[..., :k]


def _nanmean(x):
    return np.nanmean(x, axis=-1, keepdims=True)


def _nanstd(x):
    sd = np.nanstd(x, axis=-1, keepdims=True)
    return np.where(sd > 0, sd, 1.0)


def refine_peak(lags, r):
    """Sub-step peak of ``|r|``: the vertex of the parabola through the peak and its two
    neighbours (the peak itself at the ends of the range)."""
    k = int(np.nanargmax(np.abs(r)))
    if 0 < k < r.size - 1 and np.all(np.isfinite(r[k - 1:k + 2])):
        y0, y1, y2 = np.abs(r[k - 1:k + 2])
        denom = y0 - 2 * y1 + y2
        shift = 0.5 * (y0 - y2) / denom if denom < 0 else 0.0
        return float(lags[k] + shift * (lags[1] - lags[0])), float(r[k])
    return float(lags[k]), float(r[k])


def effective_sample_size(n, r1, r2):
    """Effective number of independent pairs for a correlation of two red series.

    Returns ``n (1 - r1 r2) / (1 + r1 r2)`` (Bretherton et al. 1999, Eq. 31) for lag-1
    autocorrelations ``r1`` and ``r2``.
    """
    return n * (1.0 - r1 * r2) / (1.0 + r1 * r2)


def phase_surrogates(x, size, rng):
    """Series with the periodogram of ``x`` and random phases (Ebisuzaki 1997).

    Missing values are filled with the mean before, and restored as missing after.
    """
    from align._kernels import turn_phases

    valid = np.isfinite(x)
    filled = np.where(valid, x, np.nanmean(x))
    spectrum = np.fft.rfft(filled - filled.mean())
    phases = rng.uniform(0.0, 2.0 * np.pi, (size, spectrum.size))
    phases[:, 0] = 0.0
    if x.size % 2 == 0:
        phases[:, -1] = 0.0
    turned = turn_phases(np.abs(spectrum), phases, np.empty(phases.shape, dtype=complex))
    out = np.fft.irfft(turned, x.size) + filled.mean()
    return np.where(valid, out, np.nan)


def ar1_surrogates(x, size, rng):
    """AR(1) series with the lag-1 autocorrelation, mean and sd of ``x`` (gaps restored)."""
    valid = np.isfinite(x)
    phi = lag1_autocorrelation(x[valid])
    mean, sd = np.nanmean(x), np.nanstd(x)
    grid = np.arange(x.size, dtype=float)
    tau = persistence_time(grid, max(phi, 0.0))
    out = mean + simulate_ar1(grid, tau, sd, size, rng)
    return np.where(valid, out, np.nan)


def kernel_ccf(ta, xa, tb, xb, lags, width):
    """Gaussian-kernel cross-correlation of irregular series (Rehfeld et al. 2011, Eq. 10).

    Parameters
    ----------
    ta, xa : numpy.ndarray (n_a,)
        Ages and values of ``a``.
    tb : numpy.ndarray (n_b,)
        Ages of ``b``.
    xb : numpy.ndarray (n_b,) or (S, n_b)
        Values of ``b``, or a batch of series on the same ages (surrogates).
    lags : numpy.ndarray
        Lags (yr).
    width : float
        Kernel sd (yr).

    Returns
    -------
    r : numpy.ndarray (lags,) or (S, lags)
        ``sum_ij za_i zb_j K(ta_i - tb_j - L) / sum_ij K(ta_i - tb_j - L)`` for standardised
        series and a Gaussian kernel ``K``; with ``t`` as age, a positive ``L`` pairs ``a`` at
        age ``s`` with ``b`` at ``s - L``.
    numerator, denominator : numpy.ndarray (lags, n_a)
        The sums over ``j`` for each sample ``i`` of ``a``, for a single ``xb`` (what a block
        bootstrap resamples); None for a batch.
    """
    single = np.ndim(xb) == 1
    zb = np.atleast_2d(xb)
    zb = (zb - zb.mean(axis=1, keepdims=True)) / zb.std(axis=1, keepdims=True)
    za = (xa - xa.mean()) / xa.std()
    diff = ta[:, None] - tb[None, :]
    r = np.empty((zb.shape[0], lags.size))
    numerator = np.empty((lags.size, ta.size)) if single else None
    denominator = np.empty((lags.size, ta.size)) if single else None
    for k, lag in enumerate(lags):
        weight = np.exp(-0.5 * ((diff - lag) / width) ** 2)
        total = weight.sum()
        weighted = weight @ zb.T  # (n_a, S)
        r[:, k] = (za @ weighted) / total if total > 0 else np.nan
        if single:
            numerator[k] = za * weighted[:, 0]
            denominator[k] = weight.sum(axis=1)
    return (r[0] if single else r), numerator, denominator


def lagged_products(xa, xb, max_lag):
    """Per-grid-point terms of :func:`ccf`: ``z_a[i] z_b[i - k]`` and their validity.

    Returns
    -------
    numerator, denominator : numpy.ndarray (2 max_lag + 1, n)
        The standardised products (0 where missing) and 1 where both values exist.
    """
    n = xa.size
    za = (xa - np.nanmean(xa)) / np.nanstd(xa)
    zb = (xb - np.nanmean(xb)) / np.nanstd(xb)
    products = np.full((2 * max_lag + 1, n), np.nan)
    for j, lag in enumerate(range(-max_lag, max_lag + 1)):
        if lag >= 0:
            products[j, lag:] = za[lag:] * zb[:n - lag]
        else:
            products[j, :n + lag] = za[:n + lag] * zb[-lag:]
    valid = np.isfinite(products)
    return np.where(valid, products, 0.0), valid.astype(float)


def block_bootstrap_peaks(numerator, denominator, lags, block, replicates, rng):
    """Peak lags of curves ``sum(numerator) / sum(denominator)`` over resampled blocks.

    A moving-block bootstrap (Kuensch 1989) along the second axis: each replicate joins
    randomly chosen blocks of ``block`` consecutive points until it is as long as the data.

    Returns
    -------
    numpy.ndarray
        Peak lags (yr) of the replicates.

    Notes
    -----
    A replicate's curve is ``C B^T`` with ``C`` its count of each block start and ``B`` the
    block sums of every start (lags x starts, from prefix sums), so no replicate gathers its
    blocks: the picks are grouped by start once and ``B`` is swept in order, a few lags at a
    time to bound memory, adding each start's block sums to the replicates that picked it
    (:func:`align._kernels.sum_picked_rows`; the replicates' sums stay in cache).
    """
    from align._kernels import group_by_start, sum_picked_rows

    n = numerator.shape[1]
    block, picks = _block_picks(n, block, replicates, rng)
    starts = n - block + 1
    head, rows = group_by_start(picks, starts)
    sums = np.empty((replicates, 2 * lags.size))
    chunk = max(1, BLOCK_SUM_VALUES // n)
    for lo in range(0, lags.size, chunk):
        part = slice(lo, min(lo + chunk, lags.size))
        table = np.concatenate([_block_sums(numerator[part], block),
                                _block_sums(denominator[part], block)]).T.copy()
        width = part.stop - part.start
        out = sum_picked_rows(head, rows, table, np.zeros((replicates, 2 * width)))
        sums[:, part] = out[:, :width]
        sums[:, lags.size + part.start:lags.size + part.stop] = out[:, width:]
    with np.errstate(invalid="ignore", divide="ignore"):
        return _peaks(lags, sums[:, :lags.size] / sums[:, lags.size:])


def ccf_bootstrap_peaks(xa, xb, lags, block, replicates, rng):
    """Peak lags of :func:`ccf` curves over moving-block replicates of the grid points of
    ``a``: the replicates and curves of :func:`block_bootstrap_peaks` of
    :func:`lagged_products` (the same draws), by FFT.

    Parameters
    ----------
    xa, xb : numpy.ndarray (n,)
        Series on one regular grid (NaN: missing).
    lags : numpy.ndarray (2 k + 1,)
        Lags (yr) of the steps ``-k..k``.
    block : float
        Block length (grid points).
    replicates : int
    rng : numpy.random.Generator

    Returns
    -------
    numpy.ndarray
        Peak lags (yr) of the replicates.

    Notes
    -----
    A replicate weights grid point ``i`` by ``w_i``, the number of its blocks covering it; its
    curve is ``sum_i w_i za_i zb_{i-k} / sum_i w_i [a_i and b_{i-k} valid]`` with ``za``,
    ``zb`` standardised. For all lags at once the numerator is the zero-padded FFT
    cross-correlation of ``w za`` with ``zb``, and the denominator that of ``w`` times the
    masks (rounded: whole numbers), or prefix sums of ``w`` without gaps: ``O(n log n)`` per
    replicate instead of ``O(n k)``, a chunk of replicates at a time.
    """
    from align._kernels import block_weights

    n = xa.size
    k = (lags.size - 1) // 2
    block, picks = _block_picks(n, block, replicates, rng)
    ma, mb = np.isfinite(xa), np.isfinite(xb)
    za = np.where(ma, (xa - np.nanmean(xa)) / np.nanstd(xa), 0.0)
    zb = np.where(mb, (xb - np.nanmean(xb)) / np.nanstd(xb), 0.0)
    size = sfft.next_fast_len(n + k, real=True)
    at = np.arange(-k, k + 1) % size
    gaps = not (ma.all() and mb.all())

    def correlate(padded, y_spectrum):
        return sfft.irfft(sfft.rfft(padded, workers=-1) * y_spectrum, size, workers=-1)[:, at]

    fb = np.conj(sfft.rfft(zb, size))
    fm = np.conj(sfft.rfft(mb.astype(float), size)) if gaps else None
    head, tail = np.maximum(np.arange(-k, k + 1), 0), np.maximum(np.arange(k, -k - 1, -1), 0)
    curves = np.empty((replicates, lags.size))
    per = max(1, BLOCK_SUM_VALUES // size)
    for lo in range(0, replicates, per):
        padded = np.zeros((min(per, replicates - lo), size))
        w = block_weights(picks[lo:lo + per], block, n, padded[:, :n])
        if gaps:
            masked = np.zeros_like(padded)
            np.multiply(w, ma, out=masked[:, :n])
            den = np.rint(correlate(masked, fm))
        else:  # sum of w_i over max(0, k) <= i < n + min(0, k): all but a few end points
            ends = np.zeros((w.shape[0], 2, k + 1))
            np.cumsum(w[:, :k], axis=1, out=ends[:, 0, 1:])
            np.cumsum(w[:, :n - k - 1:-1], axis=1, out=ends[:, 1, 1:])
            den = w.sum(axis=1, keepdims=True) - ends[:, 0, head] - ends[:, 1, tail]
        w *= za
        with np.errstate(invalid="ignore", divide="ignore"):
            curves[lo:lo + per] = correlate(padded, fb) / den
    return _peaks(lags, curves)


def _block_picks(n, block, replicates, rng):
    """Block length (whole grid points, at most a quarter of ``n``) and the block starts
    each replicate picks, ``ceil(n / block)`` of them: (replicates, blocks)."""
    block = int(np.clip(np.ceil(block), 1, max(n // 4, 1)))
    picks = rng.integers(0, n - block + 1, (replicates, int(np.ceil(n / block))),
                         dtype=np.int32)  # (the same draws as int64, in half the memory)
    return block, picks


def _peaks(lags, curves):
    """Refined peak lags of the curves that have a finite value."""
    return np.asarray([refine_peak(lags, curve)[0] for curve in curves
                       if np.isfinite(curve).any()])


def _block_sums(x, block):
    """Sums of ``block`` consecutive values from every start, along the last axis."""
    total = np.cumsum(x, axis=1)
    out = total[:, block - 1:].copy()
    out[:, 1:] -= total[:, :-block]
    return out


# --------------------------------------------------------------------------------------------
# the wrapper


def cross_correlate(a, b, max_lag, *, step=None, method=DEFAULT_CORRELATION_METHOD,
                    surrogates=DEFAULT_SURROGATES, surrogate_kind=DEFAULT_SURROGATE_KIND,
                    window=None, seed=None, age_reference=None, bootstrap=DEFAULT_BOOTSTRAP):
    """Cross-correlate two records over a range of lags.

    Parameters
    ----------
    a, b : tuple of (xarray.Dataset, str)
        Records and their variables.
    max_lag : float
        Largest lag (yr).
    step : float, optional
        Grid (or lag) step (yr); default the coarser native resolution rounded up.
    method : {"pearson", "kernel"}
        Pearson correlation on a common grid, or the Gaussian-kernel estimator for irregular
        sampling (Rehfeld et al. 2011).
    surrogates : int
        Surrogates of ``b`` for the p-value of the peak (0: skip).
    surrogate_kind : {"phase", "ar1"}
        Phase-randomised (Ebisuzaki 1997) or AR(1) surrogates; the kernel method always uses
        AR(1) surrogates on the irregular axis.
    window : [young, old], optional
        Ages to use (default: the overlap of the records).
    seed : int, optional
    age_reference : {"b2k", "BP"}, optional
        Reference of the window and grid (default: a's).
    bootstrap : int
        Block-bootstrap replicates for the peak-lag interval when no age ensemble exists.

    Returns
    -------
    XcorrResult
        ``peak_lag`` (yr) with its 95 % interval (from the age ensembles where present, else a
        moving-block bootstrap with blocks of ``n / n_eff`` points), ``peak_correlation``,
        ``p_value`` (the share of surrogates whose largest ``|r|`` in the lag range reaches the
        observed peak, counting the data as one), ``n_eff`` (Bretherton et al. 1999), the
        curve and the grid step.
    """
    from align.resample import native_resolution, round_step

    check_choice(method, CorrelationMethod, "method")
    check_choice(surrogate_kind, SurrogateKind, "surrogate_kind")
    if method == "kernel":
        surrogate_kind = "ar1"  # phase randomisation needs a regular grid
    if not (np.isfinite(max_lag) and max_lag > 0):
        raise InputError("max_lag must be a positive number of years", field="max_lag")
    if step is not None and not (np.isfinite(step) and step > 0):
        raise InputError("step must be a positive number of years", field="step")
    for name, count, least in (("surrogates", surrogates, 0), ("bootstrap", bootstrap, 10)):
        if not (isinstance(count, (int, np.integer)) and count >= least):
            raise InputError(f"{name} must be a whole number of at least {least} "
                             f"(got {count!r})", field=name)
    seed = resolve_seed(seed)
    rng = np.random.default_rng(seed)
    (rec_a, var_a), (rec_b, var_b) = a, b
    for rec, var in ((rec_a, var_a), (rec_b, var_b)):
        check_proxy(rec, var)
        if age_reference_of(rec) is None:
            raise InputError("the record has no timescale", source=rec.attrs.get("source"),
                             field="age")
    ref = age_reference or age_reference_of(rec_a)
    rec_a, rec_b = with_age_reference(rec_a, ref), with_age_reference(rec_b, ref)
    window = _overlap(rec_a, rec_b, window)
    step = float(step or round_step(max(native_resolution(rec_a), native_resolution(rec_b))))
    _check_sizes(max_lag, step, window, surrogates, bootstrap)
    k = int(np.floor(max_lag / step))
    if k < 1:
        raise InputError("max_lag is shorter than one grid step", field="max_lag")
    lags = np.arange(-k, k + 1) * step
    if method == "pearson":
        r, n_eff, test, ci, source = _pearson(rec_a, var_a, rec_b, var_b, window, step, k,
                                              lags, surrogates, surrogate_kind, bootstrap, rng)
    else:
        r, n_eff, test, ci, source = _kernel(rec_a, var_a, rec_b, var_b, window, step, lags,
                                             surrogates, bootstrap, rng)
    p_value, band = test
    peak, peak_r = refine_peak(lags, r)
    return XcorrResult(
        a=f"{record_name(rec_a)} {var_a}", b=f"{record_name(rec_b)} {var_b}", window=window,
        method=method, peak_lag=PeakLag(median=peak, ci95=ci, source=source),
        peak_correlation=peak_r, p_value=p_value,
        p_value_text=p_value_words(p_value, int(surrogates)), n_eff=float(n_eff),
        surrogates=SurrogateInfo(kind=surrogate_kind, count=int(surrogates)),
        curve=Curve(lags=lags.tolist(), r=_finite(r),
                    surrogate_low=[] if band is None else _finite(band[0]),
                    surrogate_high=[] if band is None else _finite(band[1])),
        grid_step=step, age_reference=ref,
        provenance=provenance(inputs=[record_input(rec_a, "a"), record_input(rec_b, "b")],
                              parameters={"variables": [var_a, var_b], "max_lag": max_lag,
                                          "step": step, "method": method,
                                          "surrogates": surrogates,
                                          "surrogate_kind": surrogate_kind, "window": window,
                                          "bootstrap": bootstrap},
                              seed=seed))


def _finite(values):
    return [None if not np.isfinite(v) else float(v) for v in values]


def surrogate_curves(curves_of, make, count, length):
    """Correlation curves of ``count`` surrogates, made and correlated a chunk at a time.

    Parameters
    ----------
    curves_of : callable
        ``curves_of(series)``: the (chunk, lags) curves of a (chunk, ``length``) batch.
    make : callable
        ``make(size)``: ``size`` new surrogate series. Drawn in turn from one generator, the
        surrogates do not depend on the chunk size.
    count, length : int
        Surrogates, and grid points per surrogate.

    Returns
    -------
    numpy.ndarray (count, lags)
        Only the curves are kept: memory grows with ``SURROGATE_VALUES``, not with
        ``count x length``. Progress is reported per chunk when reporting is on.
    """
    from align.progress import steps

    per = max(1, SURROGATE_VALUES // max(length, 1))
    progress = steps("surrogate test", count, "surrogates")
    parts = []
    for done in range(0, count, per):
        size = min(per, count - done)
        parts.append(curves_of(make(size)))
        if progress is not None:
            progress.step(size)
    return np.concatenate(parts)


def surrogate_test(r, r_s):
    """The p-value of the correlation peak against surrogates and their pointwise band.

    Parameters
    ----------
    r : numpy.ndarray (lags,)
        The correlation curve.
    r_s : numpy.ndarray (surrogates, lags)
        The curves of the surrogates.

    Returns
    -------
    p_value : float
        ``(1 + #{max |r_s| >= max |r|}) / (1 + surrogates)``, the usual Monte Carlo p-value
        (never below ``1 / (surrogates + 1)``; common practice).
    band : numpy.ndarray (2, lags)
        The surrogates' central 95 % of r at each lag.
    """
    peak = np.nanmax(np.abs(r))
    p_value = float((np.sum(np.nanmax(np.abs(r_s), axis=1) >= peak) + 1) / (r_s.shape[0] + 1))
    return p_value, np.nanpercentile(r_s, [2.5, 97.5], axis=0)


def p_value_words(p_value, surrogates, *, why=True):
    """A Monte Carlo p-value in words: ``"p < 1/(n+1)"`` at the floor of ``n`` surrogates or
    null draws (with ``why``: none of the surrogates reached the observed peak), never a bare
    0 or ``1/(n+1)`` as if exact."""
    if p_value is None:
        return "not tested"
    if p_value <= 1.0 / (surrogates + 1) * (1 + 1e-9):
        return f"p < 1/{surrogates + 1}" + (f" (none of {surrogates} surrogates reached the "
                                             "observed peak)" if why else "")
    return f"p = {p_value:.3g}"


def _check_sizes(max_lag, step, window, surrogates, bootstrap):
    """The sizes the request implies, against :mod:`align.limits`, before any work."""
    cells = (window[1] - window[0]) / step
    lags = 2 * np.floor(max_lag / step) + 1
    by = f" (step {step:g})"
    limits.check("lag_steps", lags, field="max_lag", detail=by)
    limits.check("cells", cells, field="step", detail=f" ({window[0]:g} to {window[1]:g} by "
                                                      f"{step:g})")
    limits.check("lags_x_length", lags * cells, field="max_lag", detail=by)
    limits.check("surrogates_x_length", surrogates * cells, field="surrogates", detail=by)
    limits.check("surrogates_x_length", bootstrap * cells, field="bootstrap", detail=by)


def _overlap(rec_a, rec_b, window):
    lo = max(rec_a["age_bounds"].values[0, 0], rec_b["age_bounds"].values[0, 0])
    hi = min(rec_a["age_bounds"].values[-1, 1], rec_b["age_bounds"].values[-1, 1])
    if window is not None:
        young, old = check_window(window)
        lo, hi = max(lo, young), min(hi, old)
    if hi <= lo:
        raise InputError("the records do not overlap in the window", field="window")
    return [float(lo), float(hi)]


def _pearson(rec_a, var_a, rec_b, var_b, window, step, k, lags, surrogates, kind, bootstrap,
             rng):
    start, stop = np.ceil(window[0] / step) * step, np.floor(window[1] / step) * step
    grid = resample([rec_a[[var_a]].rename({var_a: "_a"}).merge(rec_a.drop_vars(var_a)),
                     rec_b[[var_b]].rename({var_b: "_b"}).merge(rec_b.drop_vars(var_b))],
                    step, start=start, stop=stop, variables=["_a", "_b"])
    xa, xb = grid["_a"].values, grid["_b"].values
    r, _ = ccf(xa, xb, k)
    valid = np.isfinite(xa) & np.isfinite(xb)
    n_eff = effective_sample_size(int(valid.sum()), lag1_autocorrelation(xa[valid]),
                                  lag1_autocorrelation(xb[valid]))
    test = (None, None)
    if surrogates:
        make = phase_surrogates if kind == "phase" else ar1_surrogates
        test = surrogate_test(r, surrogate_curves(lambda series: ccf(xa[None, :], series, k)[0],
                                                  lambda size: make(xb, size, rng),
                                                  surrogates, xb.size))
    ensembles = [v for v in ("_a_ensemble", "_b_ensemble") if v in grid]
    if ensembles:
        count = min(grid[v].sizes["member"] for v in ensembles)
        ea = grid["_a_ensemble"].values[:count] if "_a_ensemble" in grid else xa
        eb = grid["_b_ensemble"].values[:count] if "_b_ensemble" in grid else xb
        curves, _ = ccf(ea, eb, k)
        peaks = [refine_peak(lags, row)[0] for row in np.atleast_2d(curves)
                 if np.isfinite(row).any()]
        source = "age ensembles, member by member"
    else:
        peaks = ccf_bootstrap_peaks(xa, xb, lags, valid.sum() / max(n_eff, 1.0), bootstrap,
                                    rng)
        source = "moving-block bootstrap (blocks of n / n_eff grid points)"
    return r, n_eff, test, [float(v) for v in np.percentile(peaks, [2.5, 97.5])], source


def _kernel(rec_a, var_a, rec_b, var_b, window, step, lags, surrogates, bootstrap, rng):
    from align.noise import ar1_persistence

    def select(rec, var):
        age = rec["age"].values
        x = rec[var].values.astype(float)
        ok = (age >= window[0]) & (age <= window[1]) & np.isfinite(x)
        return age[ok], x[ok]

    ta, xa = select(rec_a, var_a)
    tb, xb = select(rec_b, var_b)
    width = 0.25 * step  # Rehfeld et al. (2011): a quarter of the (coarser) mean spacing
    r, numerator, denominator = kernel_ccf(ta, xa, tb, xb, lags, width)
    r1 = ar1_persistence(ta, xa - xa.mean())
    r2 = ar1_persistence(tb, xb - xb.mean())
    n_eff = effective_sample_size(min(ta.size, tb.size), r1, r2)
    test = (None, None)
    if surrogates:
        sims = simulate_ar1(tb, persistence_time(tb, r2), xb.std(), surrogates, rng)
        test = surrogate_test(r, kernel_ccf(ta, xa, tb, sims, lags, width)[0])
    boot = block_bootstrap_peaks(numerator, denominator, lags, ta.size / max(n_eff, 1.0),
                                 bootstrap, rng)
    return (r, n_eff, test, [float(v) for v in np.percentile(boot, [2.5, 97.5])],
            "moving-block bootstrap over the samples of a")
