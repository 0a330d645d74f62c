"""What a request must be before any route sees it: addressed to this service (``Host``), not
sent by another site's page (``Origin``, ``Sec-Fetch-Site``); and the store's sweep of
temporaries left by stopped work, at most once a minute.

A service on the loopback interface answers only to loopback host names, so a web page cannot
reach it through a DNS name that it rebinds to 127.0.0.1; and a browser page of another origin
cannot drive it (a form posted from a page carries that page's ``Origin``).
"""

from __future__ import annotations

import time
from urllib.parse import urlsplit

from flask import current_app, request

from api.problems import Problem

#: Host names of the loopback interface (``serve`` on a loopback address answers only these).
LOOPBACK = ("127.0.0.1", "localhost", "::1")
SWEEP_EVERY = 60.0  # seconds between sweeps of the store's temporaries


def host_name(host):
    """``host[:port]`` (``[v6]:port`` too) without the port, lower case."""
    host = host.strip().lower()
    if host.startswith("["):
        return host[1:].split("]", 1)[0]
    return host.rsplit(":", 1)[0] if host.count(":") == 1 else host


def check_request():
    """403 for a request to a host name this service does not answer to, or from a page of
    another origin."""
    allowed = current_app.config.get("ALLOWED_HOSTS")
    if allowed is not None and host_name(request.host) not in allowed:
        raise Problem(403, f"this service does not answer to the host name "
                           f"{host_name(request.host)!r} (allowed: {', '.join(allowed)})")
    origin = request.headers.get("Origin")
    if origin is not None and (origin == "null" or urlsplit(origin).netloc.lower()
                               != request.host.lower()):
        raise Problem(403, f"requests from pages of another origin ({origin}) are refused")
    if request.headers.get("Sec-Fetch-Site") == "cross-site":
        raise Problem(403, "requests from pages of another site are refused")


def sweep_now_and_then():
    """Remove the store's temporaries older than the time limit (plus a minute), once a
    minute: what killed or timed-out work left behind goes without a restart."""
    state = current_app.extensions.setdefault("corealign.swept", [0.0])
    now = time.monotonic()
    if now - state[0] < SWEEP_EVERY:
        return
    state[0] = now
    current_app.extensions["corealign.store"].sweep(current_app.config["TIME_LIMIT"] + 60.0)


def register(app):
    app.before_request(check_request)
    app.before_request(sweep_now_and_then)
