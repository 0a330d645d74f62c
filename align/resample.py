"""Common grids: interval-aware resampling that never invents detail.

Every sample stands for an interval of depth and time. A grid cell's value is the
overlap-weighted mean of the samples covering it -- the exact integral of the piecewise-
constant record over the cell divided by the covered length -- and the cell says how well it is
covered (``coverage``), by how many samples (``n_samples``) and what native resolution lies
beneath it (``native_interval``). Cells covered less than ``min_coverage`` are missing; nothing
is interpolated unless asked for.
"""

from __future__ import annotations

import warnings
from dataclasses import dataclass

import dask.array as da
import numpy as np
import xarray as xr

from align.ages import reference_label
from align.choices import (DEFAULT_GRID_AXIS, DEFAULT_MIN_COVERAGE, DEFAULT_TIE_INTERPOLATION,
                           GridAxis, check_choice)
from align.errors import InputError
from align import limits
from align.record import (MEMBER, NV, SAMPLE, age_reference, interp_extrapolate,
                          proxy_variables, record_name, with_age_reference)
from align.provenance import history_line

#: Member x cell count above which an ensemble is resampled lazily with dask.
LAZY_ENSEMBLE = 2_000_000


class GridWarning(UserWarning):
    """A choice made for the user about the grid (the default step)."""


@dataclass
class RegularCells:
    """``m`` regular cells with edges ``start + step * k``, ``k = 0..m``.

    ``edges`` (m + 1,) and ``centre`` (m,) are allocated empty and written by the first merge
    over the cells (:func:`overlap_mean`), in its pass (at 1e7 cells a separate pass, and the
    merge reading the cells back, cost a sixth of the merge); :meth:`fill` writes them when no
    merge did. The (m, 2) bounds are a view of the edges (a cell's right edge is the next
    one's left): half the memory, and on fine grids fresh memory costs as much as a pass.
    """

    start: float
    step: float
    edges: np.ndarray
    centre: np.ndarray
    filled: bool = False

    @property
    def bounds(self):
        """The cells' bounds (m, 2): a read-only view of the edges."""
        return np.lib.stride_tricks.sliding_window_view(self.edges, 2)

    @property
    def cells(self):
        """The bounds as the compiled loops write them: a writable view of the edges."""
        stride = self.edges.strides[0]
        return np.lib.stride_tricks.as_strided(self.edges, (self.centre.size, 2),
                                               (stride, stride))

    def edge(self, k):
        """Edge ``k``: the same number the compiled loops write."""
        return self.start + self.step * k

    def fill(self):
        """The cells' bounds and centres, written now if no merge wrote them."""
        if not self.filled:
            from align._kernels import _fill_regular_cells

            _fill_regular_cells(self.start, self.step, self.cells, self.centre)
            self.filled = True
        return self.bounds, self.centre


def overlap_mean(lo, hi, values, edges, min_coverage=0.0):
    """Overlap-weighted means of interval samples over cells, with the bookkeeping.

    Parameters
    ----------
    lo, hi : numpy.ndarray (n,)
        Sample intervals, increasing, not overlapping (gaps allowed).
    values : numpy.ndarray (n,) or (n, v)
        Sample values; NaN is missing and reduces coverage.
    edges : numpy.ndarray (m + 1,) or (m, 2), or RegularCells
        Cell edges, increasing, or the cells' bounds, or regular cells (whose bounds and
        centres the first merge writes).
    min_coverage : float
        Cells covered less than this fraction get a NaN mean (default: none).

    Returns
    -------
    mean : numpy.ndarray (m, v)
        ``integral(value over cell) / covered length`` (units of ``values``); NaN where nothing
        valid overlaps or the coverage is below ``min_coverage``.
    coverage : numpy.ndarray (m, v)
        Covered fraction of each cell (dimensionless).
    count : numpy.ndarray (m, v) of int32
        Valid samples overlapping each cell.
    native : numpy.ndarray (m,)
        Mean interval length of the samples overlapping each cell (units of ``lo``).

    Notes
    -----
    Exact integration of the piecewise-constant record: cell ``j`` gets
    ``sum_i v_i |[lo_i, hi_i] ∩ [e_j, e_{j+1}]| / sum_i |[lo_i, hi_i] ∩ [e_j, e_{j+1}]|``
    over valid samples ``i``; computed by a single merge of samples and cells per variable,
    ``O(n + m)`` (:func:`align._kernels.overlap_cells` or, on fine grids,
    :func:`~align._kernels.overlap_samples`), on large grids in blocks of cells
    on all cores. The columns of the (m, v) outputs are contiguous.
    """
    values = np.asarray(values, dtype=float)
    vals2d = values[:, None] if values.ndim == 1 else values
    lo, hi = np.asarray(lo, dtype=float), np.asarray(hi, dtype=float)
    if isinstance(edges, RegularCells):
        grid, cells = (None if edges.filled else edges), edges.cells
    else:
        edges = np.asarray(edges, dtype=float)
        grid = None
        cells = np.lib.stride_tricks.sliding_window_view(edges, 2) if edges.ndim == 1 else edges
    m, nv = cells.shape[0], vals2d.shape[1]
    mean, coverage, native, count = _fresh(((nv, m), (nv, m), (m,)), int_shape=(nv, m))
    for k in range(nv):
        if not _merge(lo, hi, vals2d[:, k], cells, float(min_coverage), mean[k], coverage[k],
                      count[k], native, grid if k == 0 else None):
            raise InputError("sample intervals overlap or run backwards (a record with "
                             "tolerated age inversions cannot be resampled along age; "
                             "resample along depth)", field="bounds")
        if grid is not None:
            grid.filled = True
    return mean.T, coverage.T, count.T, native


def _fresh(shapes, int_shape=None):
    """Empty float64 arrays of ``shapes`` (and one int32 array of ``int_shape``), carved from
    one allocation: on fine grids the outputs are tens of MB each, and one block is mapped
    fresh with huge pages every time, where separate blocks of a few MB come from the heap
    with small pages or not depending on what the process freed before (resampling 1e6
    samples onto 1e6 cells took 15 to 35 ms). The arrays share the block: it is freed with
    the last of them."""
    sizes = [int(np.prod(s)) for s in shapes]
    ints = 0 if int_shape is None else int(np.prod(int_shape))
    block = np.empty(sum(sizes) + (ints + 1) // 2)
    out, at = [], 0
    for shape, size in zip(shapes, sizes):
        out.append(block[at:at + size].reshape(shape))
        at += size
    if int_shape is not None:
        out.append(block[at:].view(np.int32)[:ints].reshape(int_shape))
    return out


#: Cells per thread below which a grid is merged on one thread.
CELLS_PER_THREAD = 200_000


def _merge(lo, hi, values, cells, min_coverage, mean, coverage, count, native, grid=None):
    """Run the merge kernel over blocks of cells in parallel (it releases the GIL); each
    block starts at the sample before the first that reaches its first cell, so that the
    ordering check sees every neighbouring pair. With ``grid`` (:class:`RegularCells`) the
    kernel also writes the cells' bounds and centres. Grids of at least half as many cells as
    samples are merged sample by sample, coarser ones cell by cell (the faster of the two
    there; the same numbers). Returns whether the samples were ordered."""
    from bisect import bisect_left

    from align._kernels import overlap_cells, overlap_samples
    from align._threads import blocks, pool

    merge = overlap_samples if 2 * cells.shape[0] >= lo.size else overlap_cells

    def block(a, b):
        left = cells[a, 0] if grid is None else grid.edge(a)
        s = max(bisect_left(hi, left) - 1, 0) if a else 0
        # (neighbouring blocks both write the edge between them: the same number)
        written = () if grid is None else ((grid.start, grid.step, a), grid.centre[a:b])
        return merge(lo[s:], hi[s:], values[s:], cells[a:b], min_coverage, mean[a:b],
                     coverage[a:b], count[a:b], native[a:b], *written)

    bounds = blocks(cells.shape[0], CELLS_PER_THREAD)
    if len(bounds) == 2:
        return block(0, cells.shape[0])
    return all(pool().map(block, bounds[:-1], bounds[1:]))


def grid_cells(lo, hi, step, start=None, stop=None):
    """Regular cells from ``start`` to ``stop`` by ``step`` (:class:`RegularCells`, bounds and
    centres not yet written).

    Defaults snap the data range outward to multiples of ``step``. The edges are
    ``start + step * k``, ``k = 0..m``, exactly.
    """
    if not (np.isfinite(step) and step > 0):
        raise InputError("the grid step must be a positive number", field="step")
    for name, edge in (("start", start), ("stop", stop)):
        if edge is not None and not np.isfinite(edge):
            raise InputError(f"{name} must be a finite number (got {edge})", field=name)
    start = np.floor(lo / step) * step if start is None else float(start)
    stop = np.ceil(hi / step) * step if stop is None else float(stop)
    if stop <= start:
        raise InputError(f"the grid is empty (start {start:g} >= stop {stop:g})", field="stop")
    limits.check("cells", (stop - start) / step, field="step",
                 detail=f" ({start:g} to {stop:g} by {step:g})")
    count = int(round((stop - start) / step))
    if not np.isclose(start + count * step, stop, rtol=0, atol=1e-9 * max(1.0, abs(stop))):
        raise InputError(f"stop - start ({stop - start:g}) is not a whole number of steps "
                         f"({step:g})", field="stop")
    edges, centre = _fresh(((count + 1,), (count,)))
    return RegularCells(float(start), float(step), edges, centre)


def round_step(step):
    """The smallest of 1, 2, 2.5 or 5 times a power of ten that is at least ``step``."""
    power = 10.0 ** np.floor(np.log10(step))
    return float(next(f * power for f in (1.0, 2.0, 2.5, 5.0, 10.0)
                      if f * power >= step * (1 - 1e-12)))


def native_resolution(record, along=DEFAULT_GRID_AXIS):
    """Median sample interval of a record along ``along`` (yr or m)."""
    bounds = record[f"{along}_bounds"].values
    return float(np.median(bounds[:, 1] - bounds[:, 0]))


def resample(records, step=None, *, start=None, stop=None, variables=None,
             min_coverage=DEFAULT_MIN_COVERAGE,
             along=DEFAULT_GRID_AXIS, interpolate=False, reference=None):
    """Resample one record, or several onto one grid.

    Parameters
    ----------
    records : xarray.Dataset or list of xarray.Dataset
        Records (see ``records/README.md``).
    step : float, optional
        Cell width (yr along age, m along depth). Default: the record's median sample
        interval; for several records the coarsest of theirs (a :class:`GridWarning` says
        which).
    start, stop : float, optional
        Outer cell edges; default: the data range snapped outward to multiples of ``step``.
    variables : list of str, optional
        Proxy variables to resample (default: all).
    min_coverage : float
        Cells whose covered fraction is below this are missing.
    along : {"age", "depth"}
        The axis of the grid.
    interpolate : bool
        For cells inside a single sample (finer than the sampling), interpolate linearly
        between sample mid-points instead of repeating the sample's value. Off by default:
        it invents detail no sample measured; when used, the attributes say so.
    reference : {"b2k", "BP"}, optional
        Age reference of the grid (default: the first record's).

    Returns
    -------
    xarray.Dataset
        Dimension ``along`` (cell centres) with CF bounds ``{along}_bounds``; per variable its
        overlap-weighted means (units of the variable), ``{var}_coverage`` (fraction) and
        ``{var}_n_samples``; ``native_interval`` (``{record}_native_interval`` for several
        records; yr or m); for records with an age
        ensemble, ``{var}_ensemble`` (member, cell) resampled member by member (lazy with
        dask when large). Variables are prefixed by record name when names clash. The bounds
        are a read-only view of the cell edges (a cell's right edge is the next one's left;
        fresh memory costs as much as the merge on fine grids): ``.copy()`` them to change
        them in place. The per-cell arrays of a record share one allocation, freed with the
        last of them.
    """
    group = [records] if isinstance(records, xr.Dataset) else list(records)
    if not group:
        raise InputError("no record to resample", field="records")
    check_choice(along, GridAxis, "along")
    if not 0.0 <= min_coverage <= 1.0:
        raise InputError("min_coverage must lie between 0 and 1", field="min_coverage")
    group = _common_reference(group, along, reference)
    chosen = None
    if step is None:
        resolutions = [native_resolution(r, along) for r in group]
        coarsest = max(resolutions)
        step = round_step(coarsest)
        chosen = (f"default step {step:g}: the coarser native resolution ({coarsest:.4g}, the "
                  f"median sample interval of {record_name(group[int(np.argmax(resolutions))])}"
                  ") rounded up to a round number")
        if len(group) > 1:
            warnings.warn(chosen, GridWarning, stacklevel=2)
    # records run top-down; overlapping age intervals are refused by overlap_mean
    lo = min(r[f"{along}_bounds"].values[0, 0] for r in group)
    hi = max(r[f"{along}_bounds"].values[-1, 1] for r in group)
    grid = grid_cells(lo, hi, step, start, stop)
    first, last = grid.edge(0), grid.edge(grid.centre.size)
    if last <= lo or first >= hi:
        raise InputError(f"the grid {first:g} to {last:g} lies wholly outside "
                         f"the record(s) ({lo:g} to {hi:g} {along})", field="start")
    names = _output_names(group, variables)
    data = {f"{along}_bounds": ((along, NV), grid.bounds)}  # (written by the first merge)
    for record, wanted in zip(group, names):
        native = ("native_interval" if len(group) == 1
                  else f"{_prefix(record_name(record))}_native_interval")
        data.update(_record_cells(record, wanted, along, grid, min_coverage, interpolate,
                                  native))
    cells, centre = grid.fill()
    out = xr.Dataset(data, coords=_axis_coords(along, centre, _axis_attrs(group[0], along)))
    out.attrs.update(
        Conventions="CF-1.8", title="corealign common grid",
        resample_step=float(step), min_coverage=float(min_coverage),
        resample_method="overlap-weighted mean of interval samples (exact integration)",
        fine_cells=("linear interpolation between sample mid-points (on request)" if interpolate
                    else "piecewise constant (the covering sample's value)"),
        sources=" ; ".join(f"{record_name(r)}: {r.attrs.get('source', '')} sha256 "
                           f"{r.attrs.get('source_checksum', '')}" for r in group),
        history=history_line(f"resampled {', '.join(record_name(r) for r in group)} onto "
                             f"{cells.shape[0]} cells of {step:g} along {along}"))
    if chosen:
        out.attrs["step_choice"] = chosen
    return out


def _common_reference(group, along, reference):
    if along == "depth":
        missing = [record_name(r) for r in group if "depth" not in r.coords]
        if missing:
            raise InputError(f"{missing[0]} has no depths to resample along",
                             field="along")
        return group
    dated = [r for r in group if age_reference(r) is not None]
    if len(dated) < len(group):
        raise InputError("a record has no timescale (depth only); tie it first or resample "
                         "along depth", field="along")
    target = reference or age_reference(group[0])
    return [with_age_reference(r, target) for r in group]


def _output_names(group, variables):
    """Per record: (variable, output name); names are prefixed where records share one.

    With ``variables`` given, each record contributes those it holds, and each must be held
    by at least one record.
    """
    if variables is None:
        chosen = [proxy_variables(r) for r in group]
    else:
        chosen = [[v for v in variables if v in r] for r in group]
        for v in variables:
            if not any(v in r for r in group):
                raise InputError("no such variable in the record(s)",
                                 source=group[0].attrs.get("source"), field=v)
    seen = {}
    for names in chosen:
        for v in names:
            seen[v] = seen.get(v, 0) + 1
    prefixes = [_prefix(record_name(r)) for r in group]
    return [[(v, f"{p}_{v}" if seen[v] > 1 else v) for v in names]
            for names, p in zip(chosen, prefixes)]


def _prefix(name):
    import re

    safe = re.sub(r"\W+", "_", name).strip("_") or "record"
    return safe if safe[0].isalpha() else f"r_{safe}"


def _axis_coords(along, centre, attrs):
    """The grid axis with its index built on the cell centres themselves: given a numpy
    array, pandas copies it, which on fine grids costs as much as the merge."""
    import pandas as pd
    from xarray.indexes import PandasIndex

    return xr.Coordinates({along: xr.Variable(along, centre, attrs)},
                          indexes={along: PandasIndex(pd.Index(centre, copy=False), along)})


def _axis_attrs(first, along):
    if along == "age":
        ref = age_reference(first)
        return {"units": "yr", "long_name": f"age, {reference_label(ref)}",
                "age_reference": ref, "bounds": "age_bounds"}
    return {"units": "m", "long_name": "depth below the top of the core", "positive": "down",
            "bounds": "depth_bounds"}


def _record_cells(record, wanted, along, grid, min_coverage, interpolate, native_name):
    """One record's variables on the grid (:class:`RegularCells`): ``{name: (dims, values,
    attrs)}``."""
    if not wanted:
        return {}
    bounds = record[f"{along}_bounds"].values
    values = (record[wanted[0][0]].values.astype(float, copy=False) if len(wanted) == 1
              else np.column_stack([record[v].values.astype(float) for v, _ in wanted]))
    try:
        mean, coverage, count, native = overlap_mean(bounds[:, 0], bounds[:, 1], values, grid,
                                                     0.0 if interpolate else min_coverage)
    except InputError as exc:
        raise exc.located(source=record.attrs.get("source"), field=f"{along}_bounds") from None
    if interpolate:
        mean = _interpolate_fine(mean, count, record, along, values, grid.centre)
        mean[coverage < min_coverage] = np.nan
    dim = along
    unit = "yr" if along == "age" else "m"
    out = {native_name: (dim, native, {
        "units": unit, "long_name": f"mean sample interval of {record_name(record)} beneath "
                                    "the cell"})}
    for k, (var, name) in enumerate(wanted):
        attrs = {key: val for key, val in record[var].attrs.items()
                 if key in ("units", "long_name", "standard_name")}
        attrs.update(cell_methods=f"{along}: mean", record=record_name(record),
                     ancillary_variables=f"{name}_coverage {name}_n_samples")
        out[name] = (dim, mean[:, k], attrs)
        out[f"{name}_coverage"] = (dim, coverage[:, k], {
            "units": "1", "long_name": f"fraction of the cell covered by non-missing {var} "
                                       "samples"})
        out[f"{name}_n_samples"] = (dim, count[:, k], {
            "units": "1", "long_name": f"number of {var} samples overlapping the cell"})
    if along == "age" and "age_ensemble" in record:
        for var, name in wanted:
            out[f"{name}_ensemble"] = _ensemble_cells(record, var, grid.bounds, min_coverage)
    return out


def _interpolate_fine(mean, count, record, along, values, centre):
    """Linear interpolation between mid-points for cells inside a single sample."""
    mid = record[along].values
    out = mean.copy()
    values = values.reshape(values.shape[0], -1)
    for k in range(values.shape[1]):
        ok = np.isfinite(values[:, k])
        single = count[:, k] == 1
        if ok.sum() >= 2 and single.any():
            out[single, k] = np.interp(centre[single], mid[ok], values[ok, k])
    return out


def _ensemble_cells(record, var, cells, min_coverage):
    """Member-by-member resampling of one variable: a (member, cell) DataArray."""
    ens = record["age_ensemble"].transpose(SAMPLE, MEMBER).values
    x = record["depth"].values if "depth" in record.coords else np.arange(ens.shape[0], float)
    xb = (record["depth_bounds"].values if "depth" in record.coords
          else np.column_stack([x - 0.5, x + 0.5]))
    values = record[var].values.astype(float)

    def members(block):
        rows = []
        for m in block:
            lo = interp_extrapolate(xb[:, 0], x, ens[:, m])
            hi = interp_extrapolate(xb[:, 1], x, ens[:, m])
            rows.append(overlap_mean(lo, hi, values, cells, min_coverage)[0][:, 0])
        return np.array(rows)

    n_members, n_cells = ens.shape[1], cells.shape[0]
    if n_members * n_cells > LAZY_ENSEMBLE:
        per = max(1, LAZY_ENSEMBLE // (4 * n_cells))
        from dask import delayed

        blocks = [da.from_delayed(delayed(members)(range(s, min(s + per, n_members))),
                                  shape=(min(s + per, n_members) - s, n_cells), dtype=float)
                  for s in range(0, n_members, per)]
        data = da.concatenate(blocks, axis=0)
    else:
        data = members(range(n_members))
    return xr.DataArray(data, dims=(MEMBER, "age"), attrs={
        "units": record[var].attrs.get("units", ""), "long_name":
        f"{record[var].attrs.get('long_name', var)}, resampled on each age-ensemble member",
        "cell_methods": "age: mean"})


def align_records(a, b, *, ties=None, same_timescale=False, step=None,
                  min_coverage=DEFAULT_MIN_COVERAGE, method=DEFAULT_TIE_INTERPOLATION,
                  bridge_rate=None):
    """Put record ``b`` on record ``a``'s timescale and both on one grid.

    Parameters
    ----------
    a, b : xarray.Dataset
        The reference record and the record to bring onto its timescale.
    ties : TieTable or path, optional
        Tie points between ``b`` (``depth``) and ``a`` (``ref_depth``/``ref_age``); ``b`` is
        transferred through them (:func:`align.ties.transfer`).
    same_timescale : bool
        Without ties, the two timescales must be the same one (same ``timescale`` attribute);
        this flag says they already agree.
    step, min_coverage
        As for :func:`resample` (default step: the coarser native resolution).
    method, bridge_rate
        As for :func:`align.ties.transfer`.

    Returns
    -------
    xarray.Dataset
        The common grid with both records' variables, coverage and provenance.
    """
    from align.ties import transfer

    if ties is not None:
        b = transfer(b, ties, a, method=method, bridge_rate=bridge_rate)
    elif not same_timescale:
        ta, tb = a.attrs.get("timescale"), b.attrs.get("timescale")
        if ta is None or ta != tb:
            raise InputError(f"the records are on different timescales ({ta or 'unnamed'} and "
                             f"{tb or 'unnamed'}); give tie points, or say they agree "
                             "(--same-timescale)", source=b.attrs.get("source"),
                             field="timescale")
    grid = resample([a, b], step, min_coverage=min_coverage)
    grid.attrs["alignment"] = (f"{record_name(b)} on the timescale of {record_name(a)} "
                               + ("through tie points" if ties is not None
                                  else "(the same timescale)"))
    return grid
