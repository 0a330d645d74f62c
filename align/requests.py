"""Request files, read at the edges: a lag request or a survey in JSON.

The command line (and scripts) read a file here; the library's computations take the parsed
request (:class:`~align.schema.LagRequest`, :class:`~align.schema.SurveySpec`) and never open
request files themselves. Relative paths inside a file name files beside it when such a file
exists there, else they stay relative to the working folder; both are resolved here, once, so a
request that leaves this module names its files unambiguously.
"""

from __future__ import annotations

from pathlib import Path

from align.io import read_json
from align.schema import LagRequest, SurveySpec, validate_as


def read_request(path):
    """Read a lag request (JSON) with its file paths resolved.

    Parameters
    ----------
    path : str or os.PathLike

    Returns
    -------
    LagRequest
    """
    body = _object(path, "request file")
    base = Path(path).parent
    for side in ("a", "b"):
        _resolve_record(body.get(side), base)
        _read_sites(body.get(side), base)
    _resolve_key(body, "ties", base)
    return validate_as(LagRequest, body, source=str(path))


def read_survey(path):
    """Read a survey (JSON: explicit pairs, or an event table with marker templates) with its
    file paths resolved.

    Returns
    -------
    SurveySpec
    """
    body = _object(path, "survey file")
    base = Path(path).parent
    for pair in body.get("pairs") or []:
        if isinstance(pair, dict):
            for side in ("a", "b"):
                _resolve_record(pair.get(side), base)
    for side in ("a", "b"):
        _resolve_record(body.get(side), base)
    _resolve_key(body, "ties", base)
    _resolve_key(body.get("table"), "path", base)
    return validate_as(SurveySpec, body, source=str(path))


def _object(path, what):
    from align.errors import InputError

    body = read_json(path, what)
    if not isinstance(body, dict):
        raise InputError(f"a {what} holds a JSON object", source=str(path))
    return body


def _resolve_record(spec, base):
    _resolve_key(spec, "record", base)


def _read_sites(spec, base):
    """A ``sites`` marker that names a site file (JSON or CSV) gets the file's sites."""
    if isinstance(spec, dict) and spec.get("kind") == "sites" and isinstance(spec.get("sites"),
                                                                               str):
        from align.sites import read_sites

        _resolve_key(spec, "sites", base)
        spec["sites"] = [site.model_dump(exclude_unset=True)
                         for site in read_sites(spec["sites"]).sites]


def _resolve_key(mapping, key, base):
    if isinstance(mapping, dict) and isinstance(mapping.get(key), str):
        candidate = base / mapping[key]
        if not Path(mapping[key]).is_absolute() and candidate.exists():
            mapping[key] = str(candidate)
