"""What a record holds, summarised for people (``corealign info``) and for the catalogue."""

from __future__ import annotations

import numpy as np

from align.record import (MEMBER, age_reference, proxy_variables, record_name,
                          uncertainty_kind)
from align.schema import (CoordinateInfo, GridSummary, GridVariable, RecordInfo, Spread,
                          VariableInfo)


def describe_record(record):
    """Summarise a record.

    Parameters
    ----------
    record : xarray.Dataset
        A validated record.

    Returns
    -------
    RecordInfo
        Variables with units and missing-value counts, depth and age ranges (m; yr in the
        record's reference), sample-interval statistics, uncertainty kind and timescale
        metadata.
    """
    attrs = record.attrs
    derived = set(str(attrs.get("bounds_derived", "")).split())
    coords = {name: _coordinate(record, name, name in derived)
              for name in ("depth", "age") if name in record.coords}
    variables = [_variable(name, record.variables[name]) for name in proxy_variables(record)]
    return RecordInfo(
        name=record_name(record), source=str(attrs.get("source", "")),
        checksum=str(attrs.get("source_checksum", "")),
        **{key: (str(attrs[key]) if key in attrs else None)
           for key in ("archive", "site", "core", "timescale", "timescale_kind")},
        age_reference=age_reference(record), n_samples=record.sizes["sample"], **coords,
        uncertainty=uncertainty_kind(record),
        ensemble_members=record.sizes.get(MEMBER, 0) if "age_ensemble" in record else 0,
        variables=variables,
        history=[line for line in str(attrs.get("history", "")).splitlines() if line])


def _variable(name, var):
    """One proxy's summary (from its ``xarray.Variable``: making a DataArray scans every
    variable of the record, which would make a wide record's summary quadratic)."""
    values = var.values
    return VariableInfo(name=name, units=var.attrs.get("units"),
                        long_name=var.attrs.get("long_name"),
                        n_missing=int(np.isnan(values).sum()),
                        n_valid=int(np.isfinite(values).sum()))


def _coordinate(record, name, derived):
    bounds = record[f"{name}_bounds"].values
    width = bounds[:, 1] - bounds[:, 0]
    return CoordinateInfo(units=record[name].attrs.get("units", ""),
                          range=[float(bounds[:, 0].min()), float(bounds[:, 1].max())],
                          interval=Spread(median=float(np.median(width)),
                                          min=float(width.min()), max=float(width.max())),
                          bounds_derived=derived)


def describe_grid(grid):
    """Summarise a common grid (:func:`align.resample.resample` output).

    Returns
    -------
    GridSummary
        Axis, step and edges (yr or m), cell count, and per variable its units, valid cells
        and mean coverage (fraction).
    """
    along = "age" if "age" in grid.dims else "depth"
    bounds = grid[f"{along}_bounds"].values
    variables = [GridVariable(name=name, units=grid[name].attrs.get("units"),
                              valid_cells=int(np.isfinite(grid[name].values).sum()),
                              mean_coverage=float(np.mean(grid[f"{name}_coverage"].values)))
                 for name in grid.data_vars if f"{name}_coverage" in grid]
    return GridSummary(along=along, age_reference=grid[along].attrs.get("age_reference"),
                       step=float(grid.attrs["resample_step"]), start=float(bounds[0, 0]),
                       stop=float(bounds[-1, 1]), cells=int(grid.sizes[along]),
                       variables=variables, step_choice=grid.attrs.get("step_choice"),
                       fine_cells=str(grid.attrs.get("fine_cells", "")))
