"""Provenance: what went into a result, so that it can be reproduced.

Every result records the checksums of its inputs, its parameters, its seed and the corealign
version. Randomness only ever flows from an explicit seed: when the caller gives none, a fresh
seed is drawn once, used, and recorded.
"""

from __future__ import annotations

import datetime as _dt
import hashlib
from functools import lru_cache
from importlib import metadata

import numpy as np


@lru_cache(maxsize=1)
def version():
    """The installed corealign version (``0+unknown`` when running from an uninstalled tree).

    Looked up once per process: the installed metadata does not change while it runs.
    """
    try:
        return metadata.version("corealign")
    except metadata.PackageNotFoundError:
        return "0+unknown"


def sha256_file(path, *, chunk=1 << 20):
    """SHA-256 of a file's bytes, as hex."""
    digest = hashlib.sha256()
    with open(path, "rb") as handle:
        for block in iter(lambda: handle.read(chunk), b""):
            digest.update(block)
    return digest.hexdigest()


def sha256_bytes(data):
    """SHA-256 of a bytes object, as hex."""
    return hashlib.sha256(data).hexdigest()


def dataset_checksum(ds):
    """SHA-256 of an in-memory dataset's variables (names, dims and values), as hex."""
    digest = hashlib.sha256()
    for name in sorted(ds.variables):
        var = ds.variables[name]
        digest.update(f"{name}{var.dims}{var.dtype}".encode())
        digest.update(np.ascontiguousarray(var.values).tobytes())
    return digest.hexdigest()


def resolve_seed(seed):
    """Return ``seed`` as an int, drawing a fresh one from OS entropy when it is None."""
    if seed is None:
        return int(np.random.SeedSequence().entropy % (2**63))
    if isinstance(seed, bool) or not isinstance(seed, (int, np.integer)) or not (
            0 <= seed < 2**63):
        from align.errors import InputError

        raise InputError(f"seed must be a whole number from 0 to 2**63 - 1 (got {seed!r})",
                         field="seed")
    return int(seed)


def utc_now():
    """The current UTC time, ISO 8601 to the second."""
    return _dt.datetime.now(_dt.UTC).replace(microsecond=0).isoformat()


def history_line(text):
    """One CF ``history`` line: a UTC timestamp, the program and what it did."""
    return f"{utc_now()} corealign {version()}: {text}"


def record_input(ds, label):
    """Provenance entry of a record used as an input: its source, checksum and timescale."""
    return {"role": label, "source": str(ds.attrs.get("source", "")),
            "sha256": str(ds.attrs.get("source_checksum", "")),
            "timescale": str(ds.attrs.get("timescale", ""))}


def provenance(*, inputs, parameters, seed=None):
    """The provenance block of a result.

    Parameters
    ----------
    inputs : list of dict
        Each input's role, source and SHA-256 (see :func:`record_input`).
    parameters : dict
        Every parameter that changes the result.
    seed : int, optional
        The seed actually used.

    Returns
    -------
    dict
        ``{"inputs", "parameters", "seed", "version", "created"}``.
    """
    return {"inputs": list(inputs), "parameters": dict(parameters), "seed": seed,
            "version": version(), "created": utc_now()}
