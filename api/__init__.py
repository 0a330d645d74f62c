"""The corealign HTTP service: a Flask app factory over a record store.

``create_app(config)`` builds a fresh app (tests pass their own config, with a temporary data
folder); ``corealign serve`` runs it on a production WSGI server.
"""

from __future__ import annotations

from flask import Flask, jsonify

from align.provenance import version


def create_app(config=None):
    """Build the Flask app.

    Parameters
    ----------
    config : dict, optional
        Settings overriding the defaults (tests pass a temporary ``DATA_DIR``).
    """
    app = Flask(__name__)
    app.config.update(config or {})

    @app.get("/health")
    def health():
        return jsonify(status="ok", version=version())

    return app
