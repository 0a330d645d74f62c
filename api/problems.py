"""RFC 9457 problem details: every error the service returns, in one shape.

``application/problem+json`` with ``type``, ``title``, ``status``, ``detail``, ``instance`` and,
when one field is at fault, ``pointer`` (an RFC 6901 JSON pointer into the request body).
"""

from __future__ import annotations

from flask import jsonify, request
from pydantic import ValidationError
from werkzeug.exceptions import HTTPException

from align.errors import InputError

CONTENT_TYPE = "application/problem+json"
TYPES = {400: "malformed", 401: "unauthorised", 403: "forbidden", 404: "not-found",
         405: "method-not-allowed", 413: "too-large", 415: "unsupported-media-type",
         422: "invalid-content", 503: "unavailable"}


class Problem(Exception):
    """Raise to answer with a problem response."""

    def __init__(self, status, detail, *, pointer=None, title=None, headers=None):
        super().__init__(detail)
        self.status, self.detail, self.pointer, self.title = status, detail, pointer, title
        self.headers = dict(headers or {})


def problem_response(status, detail, *, pointer=None, title=None, headers=None):
    """A problem-details response."""
    from http import HTTPStatus

    body = {"type": f"tag:corealign,2026:problem/{TYPES.get(status, 'error')}",
            "title": title or HTTPStatus(status).phrase, "status": status, "detail": detail,
            "instance": request.path}
    if pointer is not None:
        body["pointer"] = pointer
    response = jsonify(body)
    response.status_code = status
    response.content_type = CONTENT_TYPE
    response.headers.update(headers or {})
    return response


def pointer_of(location):
    """A JSON pointer (``/a/window/0``) from a pydantic error location."""
    return "/" + "/".join(str(part).replace("~", "~0").replace("/", "~1") for part in location)


def register(app):
    """Install the handlers that turn every error into problem details."""
    from api.compute import OutOfMemory

    @app.errorhandler(Problem)
    def _problem(exc):
        return problem_response(exc.status, exc.detail, pointer=exc.pointer, title=exc.title,
                                headers=exc.headers)

    @app.errorhandler(ValidationError)
    def _validation(exc):
        first = exc.errors()[0]
        return problem_response(422, first["msg"], pointer=pointer_of(first["loc"]))

    @app.errorhandler(InputError)
    def _input(exc):
        from flask import current_app

        from api.locate import Where, words

        store = current_app.extensions.get("corealign.store")
        return problem_response(exc.status if exc.status in TYPES else 422,
                                words(str(exc), store.root if store else None),
                                pointer=Where().pointer(exc))

    @app.errorhandler(OutOfMemory)
    def _memory(exc):  # what the request asks needs more than a worker may hold
        return problem_response(413, str(exc), title="Computation too large")

    @app.errorhandler(HTTPException)
    def _http(exc):
        return problem_response(exc.code or 500, exc.description or exc.name)

    @app.errorhandler(Exception)
    def _unexpected(exc):  # a bug: logged with its traceback, answered without it
        app.logger.exception("unexpected error on %s", request.path)
        return problem_response(500, f"internal error ({exc.__class__.__name__}); this is a "
                                     "bug, not a problem with the request")
