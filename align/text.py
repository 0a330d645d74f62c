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
