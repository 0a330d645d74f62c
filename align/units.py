"""Units as the trade writes them, from the CF/UDUNITS strings records carry.

Records keep CF units (``1e-3`` for an isotope ratio in per mil, ``ng g-1`` for a
concentration); people read ``‰`` and ``ng/g``. The conversion is done by a units library that
speaks UDUNITS (the pint registry of cf-xarray), never by a hand-made table; only the names of
the dimensionless scale factors are chosen here. Imported lazily (pint is not light): reports and
texts call it, reading records does not.
"""

from __future__ import annotations

from functools import lru_cache

#: Dimensionless scale factors and the symbol the trade writes for each.
_SCALE_SYMBOLS = ((1e-2, "%"), (1e-3, "‰"), (1e-6, "ppm"), (1e-9, "ppb"), (1e-12, "ppt"))


@lru_cache(maxsize=512)
def trade_units(units):
    """``units`` (a CF/UDUNITS string) as the trade writes it: ``1e-3`` -> ``‰``,
    ``ng g-1`` -> ``ng/g``, ``m`` -> ``m``; a string the registry does not know is returned as
    it is, and a pure number (``1``) as ``""``."""
    if not units or not str(units).strip():
        return ""
    from cf_xarray.units import units as registry
    from pint.errors import PintError

    try:
        quantity = registry.Quantity(str(units).strip())
    except (PintError, ValueError, TypeError, AttributeError, SyntaxError):
        return str(units)
    if quantity.dimensionless and not format(quantity.units, "~P"):
        magnitude = float(quantity.magnitude)
        if magnitude == 1.0:
            return ""
        return next((symbol for scale, symbol in _SCALE_SYMBOLS
                     if abs(magnitude - scale) <= 1e-9 * scale), str(units))
    if float(quantity.magnitude) != 1.0:
        return str(units)
    return format(quantity.units, "~P")


def unit_label(units, reference_scale=None):
    """The units with the reference scale a file declares (``‰ VSMOW``), or ``""``."""
    text = trade_units(units)
    if reference_scale:
        text = f"{text} {reference_scale}".strip()
    return text


def with_units(name, units, reference_scale=None):
    """An axis or column label: ``d18O (‰ VSMOW)``, or the name alone without units."""
    label = unit_label(units, reference_scale)
    return f"{name} ({label})" if label else name
