"""Proxy transforms applied at the marker: ``log``, ``log10``, ``neg``.

Onsets in dust and sea-salt concentrations are fitted on log concentrations (Erhardt et al.
2019, doi:10.5194/cp-15-811-2019), whose noise is closer to additive. The transform changes
one variable of a copy of the record; the marker result names it (``log(Ca)``).
"""

from __future__ import annotations

import re

import numpy as np

from align.errors import InputError

TRANSFORMS = {"log": np.log, "log10": np.log10, "neg": np.negative}
#: A transformed variable's name, ``log(Ca)``: read back as the transform of ``Ca``.
_NAMED = re.compile(r"^(?P<transform>\w+)\((?P<inner>.*)\)$")


def marker_variable(record, variable, transform=None):
    """The record and the name of ``variable`` to detect on, transformed if asked.

    Parameters
    ----------
    record : xarray.Dataset
    variable : str
        A proxy, by variable name, ``long_name`` or header text (``δ18O H2O [‰]``).
    transform : {"log", "log10", "neg"}, optional

    Returns
    -------
    (xarray.Dataset, str)
        The record (a copy holding the transformed variable ``log(Ca)`` when transformed) and
        the variable's name in it.

    Raises
    ------
    InputError
        No such variable (the message lists those there are); an unknown transform; a log
        of a value that is not positive (naming the sample).
    """
    named = _NAMED.match(str(variable))
    if transform is None and named and named["inner"] and named["transform"] in TRANSFORMS \
            and variable not in record.data_vars:
        transform, variable = named["transform"], named["inner"]
    name = find_variable(record, variable)
    if transform is None:
        return record, name
    if transform not in TRANSFORMS:
        raise InputError(f"unknown transform {transform!r}; use one of "
                         f"{', '.join(TRANSFORMS)}", field="transform")
    values = record[name].values.astype(float)
    if transform.startswith("log"):
        bad = np.isfinite(values) & (values <= 0)
        if bad.any():
            i = int(np.argmax(bad))
            raise InputError(f"cannot take the {transform} of {values[i]:g}",
                             source=record.attrs.get("source"), field=name, row=i,
                             row_kind="sample")
    out = record.copy()
    new = f"{transform}({name})"
    attrs = dict(record[name].attrs, long_name=f"{transform} of "
                 f"{record[name].attrs.get('long_name', name)}", transform=transform)
    if transform.startswith("log"):
        attrs["units"] = "1"
    out[new] = record[name].copy(data=TRANSFORMS[transform](values)).assign_attrs(attrs)
    return out, new


def find_variable(record, variable):
    """The name of the proxy ``variable`` refers to (name, ``long_name`` or header text)."""
    from align.columns import safe_name, split_header
    from align.record import proxy_variables

    names = proxy_variables(record)
    if variable in record.data_vars:
        return variable
    for name in names:
        if record[name].attrs.get("long_name") == variable:
            return name
    cleaned = safe_name(split_header(str(variable)).name)
    if cleaned in record.data_vars:
        return cleaned
    raise InputError(f"no such variable (variables: {', '.join(names) or 'none'})",
                     source=record.attrs.get("source"), field=variable)
