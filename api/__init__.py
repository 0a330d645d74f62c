"""The corealign HTTP service: a Flask app factory over a record store.

``create_app(config)`` builds a fresh app (tests pass their own config with a temporary data
folder); ``corealign serve`` runs it on a production WSGI server (waitress). Every response
body is the same object the library's ``to_dict()`` and the CLI's ``--json`` give; every error
is RFC 9457 problem details; ``/openapi.json`` is generated from the same schema classes.
"""

from __future__ import annotations

import os
from pathlib import Path

from flask import Flask

DEFAULTS = {
    "MAX_CONTENT_LENGTH": 256 * 1024 * 1024,  # bytes; larger bodies are answered 413
    "MAX_DRAWS": 200_000,  # Monte Carlo and bootstrap draws per request
    # sizes a request implies (align.limits names; tighter than the library's)
    "LIMITS": {"cells": 2_000_000, "lag_steps": 20_001, "lags_x_length": 20_000_000,
               "surrogates_x_length": 20_000_000, "draws_x_samples": 20_000_000,
               "variable_bytes": 256 * 1024 * 1024, "columns": 500, "name_length": 256},
    "MAX_SURROGATES": 20_000,  # surrogates and bootstrap replicates per cross-correlation
    "MAX_PAIRS": 200,  # pairs per survey
    "TIME_LIMIT": 300.0,  # seconds a computation may run before it is stopped
    "WORKERS": 2,  # worker processes (0: compute in the request thread, for tests)
    "TOKEN": None,  # bearer token (None: no authentication); computing and storing need it
    "TOKEN_READS": True,  # with a token, reads need it too (False: reads are open)
    "ALLOWED_HOSTS": None,  # Host names answered (None: any; serve on loopback: loopback only)
    # bytes of data a worker process may hold (RLIMIT_DATA; None: no limit): above the
    # 2.4 GB a cross-correlation at the LIMITS above was measured to need
    "WORKER_MEMORY": 4 * 1024**3,
}


def default_data_dir():
    """``$COREALIGN_DATA_DIR``, else ``$XDG_DATA_HOME/corealign``, else
    ``~/.local/share/corealign`` (XDG Base Directory conventions)."""
    if os.environ.get("COREALIGN_DATA_DIR"):
        return Path(os.environ["COREALIGN_DATA_DIR"])
    base = os.environ.get("XDG_DATA_HOME") or Path.home() / ".local" / "share"
    return Path(base) / "corealign"


def create_app(config=None):
    """Build the service.

    Parameters
    ----------
    config : dict, optional
        Overrides of :data:`DEFAULTS` and ``DATA_DIR`` (default :func:`default_data_dir`).

    Returns
    -------
    flask.Flask
    """
    from api import guard, problems
    from api.routes import BLUEPRINTS
    from api.store import Store

    app = Flask(__name__)
    app.config.update(DEFAULTS)
    config = dict(config or {})
    limits = {**DEFAULTS["LIMITS"], **config.pop("LIMITS", {})}
    app.config.update(config, LIMITS=limits)
    app.config.setdefault("DATA_DIR", str(default_data_dir()))
    app.json.sort_keys = False
    app.extensions["corealign.store"] = Store(app.config["DATA_DIR"], reconcile=True)
    problems.register(app)
    guard.register(app)
    for blueprint in BLUEPRINTS:
        app.register_blueprint(blueprint)
    return app
