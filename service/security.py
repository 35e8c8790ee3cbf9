"""Optional bearer-token authentication and browser CORS, both settings, both off by default.

Authentication (``LINFER_API_TOKENS``): every ``/v1`` endpoint then needs
``Authorization: Bearer <token>``, compared in constant time against each configured
token (``hmac.compare_digest``). No header: 401 with ``WWW-Authenticate: Bearer``; a
wrong token: 403. ``/healthz``, ``/readyz``, ``/metrics`` and ``/openapi.yaml`` stay
open (restrict ``/metrics`` at the proxy if it must not be public).

CORS (``LINFER_CORS_ORIGINS``): for an allowed ``Origin`` the answer carries
``Access-Control-Allow-Origin`` and exposes ``X-Request-ID``; preflight ``OPTIONS``
requests to ``/v1`` are answered directly.
"""

from __future__ import annotations

import hmac

from flask import Flask, Response, current_app, request

from .api.problems import ApiProblem, problem_response

__all__ = ["init_app"]

ALLOWED_HEADERS = "Content-Type, Authorization, X-Request-ID, Accept"


def _authenticate() -> Response | None:
    settings = current_app.config["LINFER_SETTINGS"]
    tokens = settings.token_list
    if not tokens or not request.path.startswith("/v1/") or request.method == "OPTIONS":
        return None
    header = request.headers.get("Authorization", "")
    scheme, _, given = header.partition(" ")
    if scheme.lower() != "bearer" or not given.strip():
        response = problem_response(ApiProblem(
            401, "Unauthorized", "send Authorization: Bearer <token>", "unauthorized"))
        response.headers["WWW-Authenticate"] = 'Bearer realm="linfer"'
        return response
    given_bytes = given.strip().encode()
    matched = False
    for token in tokens:
        matched |= hmac.compare_digest(given_bytes, token.encode())
    if not matched:
        return problem_response(ApiProblem(403, "Forbidden", "the bearer token is not "
                                           "accepted", "forbidden"))
    return None


def _allowed_origin() -> str | None:
    origins = current_app.config["LINFER_SETTINGS"].origin_list
    origin = request.headers.get("Origin")
    if not origins or not origin:
        return None
    if "*" in origins:
        return "*"
    return origin if origin in origins else None


def _preflight() -> Response | None:
    if request.method != "OPTIONS" or not request.path.startswith("/v1/"):
        return None
    origin = _allowed_origin()
    if origin is None:
        return None
    response = Response(status=204)
    response.headers["Access-Control-Allow-Methods"] = "POST, OPTIONS"
    response.headers["Access-Control-Allow-Headers"] = ALLOWED_HEADERS
    response.headers["Access-Control-Max-Age"] = "600"
    return response


def _cors_headers(response: Response) -> Response:
    origin = _allowed_origin()
    if origin is not None:
        response.headers["Access-Control-Allow-Origin"] = origin
        response.headers["Access-Control-Expose-Headers"] = "X-Request-ID"
        if origin != "*":
            response.headers.add("Vary", "Origin")
    return response


def init_app(app: Flask) -> None:
    # Each hook does nothing without its setting, and the settings of an app are fixed
    # when it is built: a hook is registered only when its setting is on.
    settings = app.config["LINFER_SETTINGS"]
    if settings.origin_list:
        app.before_request(_preflight)
    if settings.token_list:
        app.before_request(_authenticate)
    if settings.origin_list:
        app.after_request(_cors_headers)
