"""Routes declared once: the Flask view, its body and response schemas, and OpenAPI.

``endpoint`` registers a view on a blueprint and records what it takes and returns; the
``/openapi.json`` document is generated from those records and the pydantic classes of
:mod:`align.schema`, so the service's contract cannot drift from the library's.
"""

from __future__ import annotations

import hmac
import re
from dataclasses import dataclass, field
from functools import lru_cache, wraps

from flask import current_app, request

from api.bodies import STORED_OF
from api.bodies import Problem as ProblemModel
from align.schema import json_schemas
from api.problems import CONTENT_TYPE, Problem

ROUTES = []
ERRORS = {400: "malformed request", 401: "a token is needed",
          403: "the token is wrong, or the request's Host or Origin is not this service's",
          404: "unknown id or path", 405: "method not allowed",
          413: "body over the size limit, or a computation over the worker memory limit",
          415: "unsupported media type", 422: "content fails validation",
          503: "computation stopped (time limit, or its worker ended): try again later"}


@dataclass
class Route:
    """What one operation takes and returns, for the view and for OpenAPI."""

    method: str
    path: str
    name: str
    summary: str
    body: type | None = None
    multipart: dict | None = None
    response: type | None = None
    produces: tuple = ("application/json",)
    status: int = 200
    write: bool = False
    computes: bool = False
    parameters: list = field(default_factory=list)
    public: bool = False
    links: dict = field(default_factory=dict)


def endpoint(blueprint, rule, method, *, summary, body=None, multipart=None, response=None,
             produces=("application/json",), status=200, write=False, computes=False,
             query=(), public=False, links=None):
    """Register a view (decorator). A JSON ``body`` model is parsed and validated first and
    passed as ``body=``. With a token configured, routes that write or compute always need
    it, reads unless ``TOKEN_READS`` is off; ``public`` routes (health, this document) never.
    ``links`` are OpenAPI links of the success response (what to read next, by id).
    """

    def decorate(view):
        names = re.findall(r"<(?:\w+:)?(\w+)>", rule)
        path = (blueprint.url_prefix or "") + re.sub(r"<(?:\w+:)?(\w+)>", r"{\1}", rule)
        ROUTES.append(Route(method, path, view.__name__, summary, body, multipart, response,
                            tuple(produces), status, write, computes,
                            [*names, *(("query", q) for q in query)], public,
                            dict(links or {})))

        @wraps(view)
        def handle(**kwargs):
            if not public and (write or computes or current_app.config["TOKEN_READS"]):
                check_token()
            if body is not None:
                kwargs["body"] = parse_body(body)
            return view(**kwargs)

        blueprint.add_url_rule(rule, endpoint=view.__name__, view_func=handle, methods=[method])
        return handle

    return decorate


def parse_body(model):
    """The request's JSON body validated by ``model``: 415 if not JSON, 400 if malformed,
    422 (with a pointer) if it fails validation."""
    if request.mimetype != "application/json":
        got = request.mimetype or "no content type"
        raise Problem(415, f"send the body as application/json (got {got})")
    try:
        data = request.get_json(silent=True)
    except RecursionError:
        raise Problem(400, "the body is nested too deeply") from None
    if data is None:
        raise Problem(400, "the body is not valid JSON")
    if not isinstance(data, dict):
        raise Problem(422, "the body must be a JSON object", pointer="")
    return model.model_validate(data)


def check_token():
    """401 without a bearer token, 403 with a wrong one (compared in constant time)."""
    token = current_app.config.get("TOKEN")
    if not token:
        return
    given = request.headers.get("Authorization", "")
    if not given.startswith("Bearer "):
        raise Problem(401, "this service needs a token: send Authorization: Bearer <token>",
                      headers={"WWW-Authenticate": 'Bearer realm="corealign"'})
    if not hmac.compare_digest(given[7:].encode(), token.encode()):
        raise Problem(403, "the token is not the one this service was started with")


def openapi_document(version):
    """The OpenAPI 3.1 document of every registered route, built once per version and set of
    routes (the same object is returned after: callers must not change it)."""
    return _openapi_document(version, len(ROUTES))


def openapi_text(version):
    """:func:`openapi_document` as JSON text, serialised once (what ``/openapi.json`` sends)."""
    return _openapi_text(version, len(ROUTES))


@lru_cache(maxsize=4)
def _openapi_text(version, _routes):
    import json

    return json.dumps(openapi_document(version))


@lru_cache(maxsize=4)
def _openapi_document(version, _routes):
    models = {r.body for r in ROUTES if r.body} | {r.response for r in ROUTES if r.response}
    models |= {STORED_OF[m] for m in models if m in STORED_OF}
    schemas = json_schemas(sorted(models | {ProblemModel}, key=lambda m: m.__name__))
    paths = {}
    for route in ROUTES:
        op = {"operationId": route.name, "summary": route.summary, "responses": {}}
        params = []
        for p in route.parameters:
            if isinstance(p, tuple):
                params.append({"name": p[1]["name"], "in": "query", "required": False,
                               "schema": p[1]["schema"]})
            else:
                params.append({"name": p, "in": "path", "required": True,
                               "schema": {"type": "string", "pattern": "^[0-9a-f]{64}$"}
                               if p.endswith("_id") else {"type": "string",
                                                          "pattern": "^[a-z_]+\\.(svg|png)$"}})
        if params:
            op["parameters"] = params
        if route.body is not None:
            op["requestBody"] = {"required": True, "content": {"application/json": {
                "schema": {"$ref": f"#/components/schemas/{route.body.__name__}"}}}}
        if route.multipart is not None:
            op["requestBody"] = {"required": True, "content": {"multipart/form-data": {
                "schema": route.multipart}}}
        op["responses"][str(route.status)] = _success(route)
        errors = [400, 404, 413, 415, 422] if (route.body or route.multipart) else [404]
        if any(isinstance(p, tuple) for p in route.parameters):
            errors.append(422)  # a query parameter out of its range
        if route.computes:
            errors.append(503)
        if not route.public:  # with a token configured (reads: unless TOKEN_READS is off)
            errors += [401, 403]
            op["security"] = [{"bearer": []}]
        for code in sorted(set(errors)):
            op["responses"][str(code)] = {"description": ERRORS[code], "content": {
                CONTENT_TYPE: {"schema": {"$ref": "#/components/schemas/Problem"}}}}
        paths.setdefault(route.path, {})[route.method.lower()] = op
    return {"openapi": "3.1.0",
            "servers": [{"url": "/", "description": "this service (the host that serves "
                                                    "this document)"}],
            "info": {"title": "corealign", "version": version,
                     "description": "Date an abrupt event in one paleoclimate record against "
                                    "a climate transition in another, with an uncertainty "
                                    "budget. Bodies are the same objects as the library's "
                                    "to_dict() and the CLI's --json."},
            "paths": paths,
            "components": {"schemas": schemas, "securitySchemes": {
                "bearer": {"type": "http", "scheme": "bearer"}}}}


def _success(route):
    if route.status == 204:
        return {"description": "done"}
    out = {"description": "created" if route.status == 201 else "ok"}
    if route.response is not None:
        out["content"] = {"application/json": {
            "schema": {"$ref": f"#/components/schemas/{route.response.__name__}"}}}
    else:
        out["content"] = {kind: {"schema": {"type": "string"}} for kind in route.produces}
    if route.status == 201:
        out["headers"] = {"Location": {"description": "where the created resource is read",
                                       "schema": {"type": "string"}}}
    if route.links:
        out["links"] = {name: {"operationId": operation, "parameters": parameters}
                        for name, (operation, parameters) in route.links.items()}
    return out
